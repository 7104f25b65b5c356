/**
 * inspectModel's skipped tensors and describeSkipped on the seeded small torchvision VisionTransformer
 * (fixtures/attention/vit-opset14.onnx, exported by PyTorch): torchvision's MultiheadAttention runs
 * sequence-first ([T, N, D], documented for batch_first=False in torch.nn.MultiheadAttention) and views
 * Q, K, V as [N·H, T, d] (torch.nn.functional.multi_head_attention_forward), so its internals have the
 * batch on a later axis or merged with the heads — none is a row per stimulus.
 */
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { describeSkipped, describeSkippedTensor, inspectModel, type SkippedTensor } from '../../src/record/inspect-model.js';
import { runSonde } from '../helpers/onnx-builder.js';

const VIT = join(new URL('../reference/fixtures/attention/', import.meta.url).pathname, 'vit-opset14.onnx');

describe('inspectModel', () => {
  it('inspectModel says where the batch went in every attention internal: [T, N, ·] batch-later, [N·H, ·, ·] and [T, N·H, d] merged', async () => {
    const { skippedTensors } = await inspectModel(VIT);
    const of = (suffix: string) => skippedTensors.find((t) => t.name === `/encoder/layers/encoder_layer_1/self_attention/${suffix}`)!;
    expect(of('MatMul_output_0')).toMatchObject({ reason: 'batch-later', dims: ['17', 'N', '48'] }); // in-projection, 3·D
    expect(of('Reshape_output_0')).toMatchObject({ reason: 'batch-merged', dims: ['17', 'N·2', '8'] });
    expect(of('MatMul_1_output_0')).toMatchObject({ reason: 'batch-merged', dims: ['N·2', '17', '17'] }); // scores
    expect(of('Gemm_output_0')).toMatchObject({ reason: 'batch-merged', dims: ['N·17', '16'] }); // output projection on [T·N, D]
    expect(describeSkippedTensor(of('Softmax_output_0'))).toBe('/encoder/layers/encoder_layer_1/self_attention/Softmax_output_0 (Softmax, batch merged with another axis: [N·2, 17, 17])');
  });
});

describe('describeSkipped', () => {
  it('describeSkipped counts by reason and points at the listing; a few are named', async () => {
    const inspection = await inspectModel(VIT);
    const line = describeSkipped(inspection, 'vit.onnx')!;
    const count = (reason: SkippedTensor['reason']) => inspection.skippedTensors.filter((t) => t.reason === reason).length;
    expect(line).toBe(
      `skipped ${inspection.skippedTensors.length} tensors that are not per-stimulus activations: ${count('constant')} do not depend on the input, ${count('type')} not float32, ${count('batch-merged')} batch merged with another axis, ${count('batch-later')} batch not on the first axis (\`sonde layers vit.onnx --skipped\` lists them)`,
    );
    expect(count('batch-merged')).toBe(26); // 13 per block
    expect(count('batch-later')).toBe(14); // 7 per block
    expect(count('batch')).toBe(0); // with a free batch axis every one is placed
    const few = { skippedTensors: inspection.skippedTensors.slice(0, 2) };
    expect(describeSkipped(few)).toBe(`skipped 2 tensors that are not per-stimulus activations: ${few.skippedTensors.map(describeSkippedTensor).join(', ')}`);
    expect(describeSkipped({ skippedTensors: [] })).toBeNull();
  });

  it('sonde layers --skipped lists every skipped tensor on its own line, and --json carries all of them with reasons and layouts', async () => {
    const listed = await runSonde(['layers', VIT, '--skipped']);
    const inspection = await inspectModel(VIT);
    const lines = listed.stdout.trim().split('\n');
    expect(lines).toHaveLength(inspection.skippedTensors.length + 1);
    expect(lines[lines.length - 1]).toBe(`${inspection.skippedTensors.length} tensors skipped; ${inspection.layers.length} recordable`);
    const json = JSON.parse((await runSonde(['layers', VIT, '--json'])).stdout) as { skipped: SkippedTensor[]; layers: Array<{ layout: { kind: string } }> };
    expect(json.skipped).toHaveLength(inspection.skippedTensors.length);
    expect(json.layers.every((l) => typeof l.layout.kind === 'string')).toBe(true);
  });
});
