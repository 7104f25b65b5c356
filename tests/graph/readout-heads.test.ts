import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { decodeModel } from '../../src/graph/onnx.js';
import { addReadoutHeads } from '../../src/graph/readout-heads.js';
import { buildTinyNet, tempFolder } from '../helpers/onnx-builder.js';

function tiny() {
  const dir = tempFolder();
  const path = join(dir, 'net.onnx');
  writeFileSync(path, buildTinyNet({ seed: 3, classes: 4 }));
  return loadModel(path);
}
const spec = (C: number) => ({ layer: 'relu1', rank: 3, mean: new Float64Array(C).fill(0.5), scale: new Float64Array(C).fill(2), heads: [{ category: 'ring shape', weights: new Float64Array(C).fill(1), intercept: -1 }, { category: 'bar', weights: new Float64Array(C).fill(-1), intercept: 1 }] });

describe('addReadoutHeads', () => {
  it('addReadoutHeads keeps the original nodes, initializers and outputs first and unchanged, and appends pool → standardise → one Gemm per head → Concat', () => {
    const model = tiny();
    const before = model.proto.graph!.node!.length;
    const result = addReadoutHeads(model, spec(6));
    const out = decodeModel(result.bytes).graph!;
    expect(out.node!.slice(0, before).map((n) => n.name)).toEqual(model.proto.graph!.node!.map((n) => n.name));
    expect(out.node!.slice(before).map((n) => n.opType)).toEqual(['GlobalAveragePool', 'Flatten', 'Sub', 'Div', 'Gemm', 'Gemm', 'Concat']);
    expect(out.output!.map((o) => o.name)).toEqual(['logits', 'readout_heads', 'head_ring_shape', 'head_bar']);
    expect(result.headOutputs).toEqual(['head_ring_shape', 'head_bar']);
    // the model object itself is left as it was
    expect(model.proto.graph!.node!.length).toBe(before);
    // a vector layer is read without pooling
    const flat = decodeModel(addReadoutHeads(model, { ...spec(8), layer: 'flat', rank: 1 }).bytes).graph!;
    expect(flat.node!.slice(before).map((n) => n.opType)).toEqual(['Sub', 'Div', 'Gemm', 'Gemm', 'Concat']);
  });

  it('addReadoutHeads gives new tensors names no tensor has, and refuses an unknown layer, mismatched sizes and non-finite weights', () => {
    const model = tiny();
    const taken = addReadoutHeads(model, { ...spec(6), output: 'logits' });
    expect(taken.output).toBe('logits_2');
    expect(() => addReadoutHeads(model, { ...spec(6), layer: 'nope' })).toThrow(/"nope" is not a tensor/);
    expect(() => addReadoutHeads(model, { ...spec(6), scale: new Float64Array(5) })).toThrow(/6 means, 5 scales/);
    const bad = spec(6);
    bad.heads[0]!.weights[2] = Number.NaN;
    expect(() => addReadoutHeads(model, bad)).toThrow(/"ring shape" has a non-finite weight/);
  });
});
