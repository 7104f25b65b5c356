import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { fusionBreaks, fusionNotice, tensorsFusedAway } from '../../src/graph/fusions.js';
import { loadModel } from '../../src/graph/load-model.js';
import { buildTinyNet, tempFolder } from '../helpers/onnx-builder.js';

describe('tensorsFusedAway', () => {
  // onnxruntime's "Conv Activation Fusion" (graph optimisations documentation, extended level): a Conv
  // followed by Relu becomes one FusedConv node, so the Conv output no longer exists (common practice)
  it('tensorsFusedAway(model, names) lists the Conv outputs a following Relu is fused into, never the model output', async () => {
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    writeFileSync(path, buildTinyNet({ bias: true }));
    const model = loadModel(path);
    const logits = model.proto.graph!.output![0]!.name!;
    const away = await tensorsFusedAway(model, ['conv0', 'conv1', 'conv2', logits]);
    expect(away).toEqual(expect.arrayContaining(['conv0', 'conv1', 'conv2']));
    expect(away).not.toContain(logits);
  });

  it('fusionBreaks(model, names) names the Conv outputs before a Relu and the residual sum before its Relu, each of them also fused away by the runtime itself', async () => {
    const folder = tempFolder();
    const path = join(folder, 'res.onnx');
    writeFileSync(path, buildTinyNet({ bias: true, residual: true, widths: [16, 16, 32] }));
    const model = loadModel(path);
    const names = ['conv0', 'relu0', 'conv1', 'res', 'relu1', 'conv2'];
    const breaks = fusionBreaks(model, names);
    expect(breaks).toEqual(['conv0', 'conv1', 'res', 'conv2']);
    // the runtime's own optimised graph agrees (its blocked layout, which fuses Conv→Add→Relu, needs
    // channel counts that fill its blocks: 16 here): none of them is held as it is
    expect(await tensorsFusedAway(model, names)).toEqual(expect.arrayContaining(breaks));
    expect(fusionNotice(model, names)).toMatch(/^4 of the 6 recorded tensors .*conv0, conv1, res and 1 more.*--layers op:Relu/);
    expect(fusionNotice(model, ['relu0', 'relu1'])).toBeNull();
  });
});
