/**
 * Modulable tensors of the seeded small torchvision VisionTransformer (tests/reference/fixtures/attention,
 * 2 layers, 2 heads, width 16; made by tests/reference/make_gradient_fixtures.py with python3-torch).
 */
import { describe, expect, it } from 'vitest';
import { inspectModel } from '../../src/record/inspect-model.js';
import { headsFromGraph, modulationSites, siteShapes } from '../../src/record/site-shapes.js';

const MODEL = new URL('../reference/fixtures/attention/vit-opset14.onnx', import.meta.url).pathname;
const BLOCK0 = '/encoder/layers/encoder_layer_0/Add_1_output_0';
const ATTENTION1 = '/encoder/layers/encoder_layer_1/self_attention/Reshape_3_output_0';

describe('modulationSites', () => {
  it('modulationSites(vit) has the residual stream as 16 features at 17 tokens and the merged attention output as a shared site of 2 heads', async () => {
    const inspection = await inspectModel(MODEL);
    const sites = modulationSites(inspection);
    expect(sites.get(BLOCK0)).toMatchObject({ features: 16, positions: 17, grid: { prefix: 1, height: 4, width: 4 } });
    expect(sites.get(BLOCK0)!.shared).toBeUndefined();
    // torchvision's attention output before out_proj is [T·N, D] (batch and tokens merged): one gain row for all stimuli
    expect(sites.get(ATTENTION1)).toMatchObject({ features: 16, shared: true, heads: 2 });
    // the patch embedding convolution stays a channels-first map
    const conv = inspection.layers.find((l) => l.op === 'Conv')!;
    expect(siteShapes(inspection.layers).get(conv.name)).toMatchObject({ features: 16, positions: 16, grid: { prefix: 0, height: 4, width: 4 } });
  });

  it('headsFromGraph(tensor) finds the attention-weighted values (MatMul after Softmax) upstream through Reshape/Transpose, and nothing from a block output', async () => {
    const inspection = await inspectModel(MODEL);
    expect(headsFromGraph(inspection.structure, inspection.probed, ATTENTION1, 16)).toBe(2);
    expect(headsFromGraph(inspection.structure, inspection.probed, BLOCK0, 16)).toBeNull();
  });

  it('modulationSites(vit) gives no heads to the attention output after the output projection, which mixes them, whatever its layout says', async () => {
    const inspection = await inspectModel(MODEL);
    const mixed = '/encoder/layers/encoder_layer_0/self_attention/Transpose_5_output_0';
    expect(modulationSites(inspection).get(mixed)).toMatchObject({ features: 16, positions: 17 });
    expect(modulationSites(inspection).get(mixed)!.heads).toBeUndefined();
  });
});
