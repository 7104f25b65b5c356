import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { tensorsFusedAway } from '../../src/graph/fusions.js';
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
});
