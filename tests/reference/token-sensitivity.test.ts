/**
 * Sensitivities at token tensors ([N, T, D], features on the last axis) against PyTorch autograd on the
 * small seeded torchvision VisionTransformer (fixtures/attention/tokens/, written by
 * tests/reference/make_token_fixtures.py with Debian's python3-torch in float64): per feature f, the gain
 * sensitivity mean_n Σ_t (∂y_c/∂a_ntf)·a_ntf and the offset sensitivity mean_n Σ_t ∂y_c/∂a_ntf, at a
 * block output (the residual stream) and at the MLP's GELU output of the last block.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { senseSites } from '../../src/replay/sense.js';
import { parseNpy } from '../../src/stimuli/npy.js';

const FOLDER = new URL('./fixtures/attention/', import.meta.url).pathname;
const TOKENS = join(FOLDER, 'tokens');
const MODEL = join(FOLDER, 'vit-opset14.onnx');
const INPUTS = join(FOLDER, 'inputs.npy');
const INDEX = JSON.parse(readFileSync(join(TOKENS, 'index.json'), 'utf8')) as { sensitivities: Array<{ module: string; onnx: string; slug: string; features: number }>; headsNet: { onnx: string; heads: number } };
const HEADS_NET = join(TOKENS, 'heads-net.onnx');

function npy64(path: string): Float64Array {
  const t = parseNpy(readFileSync(path), path);
  if (!(t.data instanceof Float64Array)) throw new Error(`${path} is not float64`);
  return t.data;
}

/** max |a − ref| / the category's max |ref|, worst over categories ([F, K]: i = f*K + c). */
function worstRelative(a: Float64Array, ref: Float64Array, F: number, K: number): number {
  let worst = 0;
  for (let c = 0; c < K; c++) {
    let largest = 0;
    for (let f = 0; f < F; f++) largest = Math.max(largest, Math.abs(ref[f * K + c]!));
    for (let f = 0; f < F; f++) worst = Math.max(worst, Math.abs(a[f * K + c]! - ref[f * K + c]!) / largest);
  }
  return worst;
}

describe('senseSites at token tensors vs PyTorch autograd (small seeded VisionTransformer)', () => {
  const sites = INDEX.sensitivities;

  it('senseSites --method exact gives one value per feature (D, not T) summed over tokens, within 1e-4 of autograd, gain and offset', async () => {
    for (const kind of ['gain', 'offset'] as const) {
      const result = await senseSites({ model: MODEL, stimuli: INPUTS, site: sites.map((s) => s.onnx), kind, threads: 1 });
      for (const [i, site] of sites.entries()) {
        const block = result.sites[i]!;
        expect(block.channels, site.module).toBe(site.features);
        const worst = worstRelative(block.sensitivity, npy64(join(TOKENS, `${site.slug}_${kind}.npy`)), site.features, block.categories.length);
        if (process.env['SONDE_PRINT']) console.log(`${site.module} ${kind} ${worst.toExponential(2)}`);
        expect(worst, `${site.module} ${kind}`).toBeLessThanOrEqual(1e-4);
      }
    }
  }, 120_000);

  it('senseSites --method secant at a token site agrees with autograd within its step error (central differences through the injected per-feature gain)', async () => {
    const site = sites[0]!;
    const result = await senseSites({ model: MODEL, stimuli: INPUTS, site: site.onnx, kind: 'gain', method: 'secant', threads: 1 });
    const block = result.sites[0]!;
    expect(block.channels).toBe(site.features);
    const worst = worstRelative(block.sensitivity, npy64(join(TOKENS, `${site.slug}_gain.npy`)), site.features, block.categories.length);
    if (process.env['SONDE_PRINT']) console.log(`secant ${site.module} ${worst.toExponential(2)}`);
    // float32 central differences at the default step: truncation O(h²) plus rounding ~ε/h (../shared/DOMAIN.md)
    expect(worst).toBeLessThanOrEqual(1e-2);
  }, 120_000);

  it('senseSites --per head at the merged heads of an attention layer (batch-first, 4 heads of 4) gives one value per head, the sum over its features, within 1e-4 of autograd for a gain per head', async () => {
    const result = await senseSites({ model: HEADS_NET, stimuli: INPUTS, site: INDEX.headsNet.onnx, kind: 'gain', per: 'head', threads: 1 });
    const block = result.sites[0]!;
    expect(block.channels).toBe(INDEX.headsNet.heads);
    expect(block.unit).toBe('head');
    expect(result.metadata['sonde.per']).toBe('head');
    const worst = worstRelative(block.sensitivity, npy64(join(TOKENS, 'heads_net_head_gain.npy')), INDEX.headsNet.heads, block.categories.length);
    if (process.env['SONDE_PRINT']) console.log(`per head ${worst.toExponential(2)}`);
    expect(worst).toBeLessThanOrEqual(1e-4);
  }, 120_000);

  it('senseSites --per head refuses a site whose heads are not known (after the output projection), naming it', async () => {
    const mixed = INDEX.sensitivities[0]!.onnx; // a block output: heads already mixed
    await expect(senseSites({ model: MODEL, stimuli: INPUTS, site: mixed, kind: 'gain', per: 'head', threads: 1 })).rejects.toThrow(/--per head: the heads of ".*Add_1_output_0" are not known/);
  });
});
