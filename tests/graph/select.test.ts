import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { selectLayers } from '../../src/graph/select.js';

const layers = [
  { name: 'conv1', op: 'Conv', default: false },
  { name: 'relu1', op: 'Relu', default: true },
  { name: 'logits', op: 'Gemm', default: true },
];

describe('selectLayers', () => {
  it('selectLayers joins terms with +, and a comma-separated list of tensor names is refused with the + form as the fix', () => {
    expect(selectLayers(layers, 'relu1+logits').map((l) => l.name)).toEqual(['relu1', 'logits']);
    let error: unknown;
    try {
      selectLayers(layers, 'relu1,logits');
    } catch (caught) {
      error = caught;
    }
    expect(error).toBeInstanceOf(UsageError);
    expect((error as UsageError).message).toBe('--layers "relu1,logits": several tensors are joined with +, not commas');
    expect((error as UsageError).hint).toBe("write --layers 'relu1+logits'");
    // op: lists keep their commas
    expect(selectLayers(layers, 'op:Conv,Gemm').map((l) => l.name)).toEqual(['conv1', 'logits']);
  });
});
