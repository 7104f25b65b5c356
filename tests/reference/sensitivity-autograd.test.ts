/**
 * senseSites against PyTorch (fixtures made by tests/reference/make_fixtures.py with Debian's
 * python3-torch 1.13 on float64 copies of the models, the 4 stimuli of inputs.npy; see
 * tests/reference/README.md): per site, [C, K] arrays of
 *   gain_exact / offset_exact            autograd ∂ȳ_c/∂g_k at g = 1 and ∂ȳ_c/∂b_k at b = 0,
 *   gain_secant / offset_secant          float64 central secants D(h) at h = 0.01,
 *   gain_richardson / offset_richardson  float64 Richardson (4·D(h/2) − D(h))/3 at h = 2e-3.
 * Error measure: max over entries of |sonde − reference| / (largest |reference| of the entry's
 * category). A category whose autograd values are all 0 (SqueezeNet's final ReLU leaves some logits at
 * 0 for every stimulus) has no scale; Sonde must give exactly 0 there too.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { defaultStep, type SenseMethod, type SiteSensitivity } from '../../src/replay/sense-types.js';
import { senseSites } from '../../src/replay/sense.js';
import { parseNpy } from '../../src/stimuli/npy.js';

const FIXTURES = new URL('./fixtures/', import.meta.url).pathname;

/**
 * The four reference networks and their sites. `kinks`: how many entries (of C·K, per kind) have a
 * ReLU/Clip kink so close to the operating point that PyTorch's own float64 Richardson value at Sonde's
 * default steps lies more than KINK of the category maximum from autograd — entries no finite difference
 * at these steps can resolve (counted on the committed fixtures). `autograd`: the bound on the other
 * entries, 1e-2 (the contract). Measured away from kinks: gain ≤ 9.6e-3 (gated), offset ≤ 7.5e-3 (branching).
 */
const MODELS = [
  { name: 'homogeneous', what: 'bias-free ReLU network', channels: 32, outputs: 10, kinks: { gain: 0, offset: 0 }, autograd: { gain: 1e-2, offset: 1e-2 } },
  { name: 'residual', what: 'MobileNetV2, ReLU6 site', channels: 480, outputs: 10, kinks: { gain: 13, offset: 80 }, autograd: { gain: 1e-2, offset: 1e-2 } },
  // offsets: at an offset step of 2e-3 float32 rounding alone left 1.9e-2 here; at the default 5e-3, 7.5e-3
  { name: 'branching', what: 'SqueezeNet 1.1, ReLU site in a Fire branch', channels: 192, outputs: 10, kinks: { gain: 6, offset: 6 }, autograd: { gain: 1e-2, offset: 1e-2 } },
  { name: 'gated', what: 'MobileNetV3-Small, Hardswish site before an SE gate', channels: 240, outputs: 8, kinks: { gain: 0, offset: 1 }, autograd: { gain: 1e-2, offset: 1e-2 } },
] as const;
const KINDS = ['gain', 'offset'] as const;

/** Where a float64 reference at the default steps is farther than this from autograd, a kink lies within the step. */
const KINK = 5e-3;
/**
 * Sonde's defaults against PyTorch's float64 Richardson at the same steps: float32 rounding only, ~ε·|y|/h
 * amplified ~3× by the extrapolation's weights. Measured: ≤ 9.6e-3 (gated gain), offsets ≤ 7.4e-3.
 */
const RICHARDSON_ROUNDING = 1.5e-2;
/** Defaults against autograd over all entries, kinks included (measured ≤ 1.3e-2: branching gain). */
const OUTRIGHT = 2e-2;
/** Euler's identity with the default values (measured ≤ 1.3e-4 of max |y|). */
const EULER = 1e-3;

interface Reference {
  site: string;
  step: number;
  richardsonStep: number;
  exact: Float64Array;
  secant: Float64Array;
  richardson: Float64Array;
}

function npy64(path: string): Float64Array {
  const t = parseNpy(readFileSync(path), path);
  if (!(t.data instanceof Float64Array)) throw new Error(`${path} is not float64`);
  return t.data;
}

function reference(model: string, kind: 'gain' | 'offset'): Reference {
  const folder = join(FIXTURES, model, 'sensitivity');
  const site = JSON.parse(readFileSync(join(folder, 'site.json'), 'utf8')) as { site: string; step: number; richardson_step: number; richardson_offset_step: number };
  return {
    site: site.site,
    step: site.step,
    richardsonStep: kind === 'gain' ? site.richardson_step : site.richardson_offset_step,
    exact: npy64(join(folder, `${kind}_exact.npy`)),
    secant: npy64(join(folder, `${kind}_secant.npy`)),
    richardson: npy64(join(folder, `${kind}_richardson.npy`)),
  };
}

/** Largest |scale| per category of a [C, K] array. */
function categoryMax(scale: Float64Array, C: number, K: number): Float64Array {
  const out = new Float64Array(K);
  for (let k = 0; k < C; k++) for (let c = 0; c < K; c++) out[c] = Math.max(out[c]!, Math.abs(scale[k * K + c]!));
  return out;
}

/**
 * max |a − b| / (category max of `scale`) over entries not excluded; categories with scale 0 are
 * checked to be exactly 0 in `a` (Infinity otherwise).
 */
function worstRelative(a: Float64Array, b: Float64Array, scale: Float64Array, C: number, K: number, exclude?: Uint8Array): number {
  const largest = categoryMax(scale, C, K);
  let worst = 0;
  for (let k = 0; k < C; k++) {
    for (let c = 0; c < K; c++) {
      const i = k * K + c;
      if (exclude?.[i]) continue;
      if (largest[c] === 0) {
        if (a[i] !== 0) return Number.POSITIVE_INFINITY;
        continue;
      }
      worst = Math.max(worst, Math.abs(a[i]! - b[i]!) / largest[c]!);
    }
  }
  return worst;
}

/** Entries where the float64 reference itself is more than KINK from autograd. */
function kinked(ref: Reference, C: number, K: number): { mask: Uint8Array; count: number } {
  const largest = categoryMax(ref.exact, C, K);
  const mask = new Uint8Array(C * K);
  let count = 0;
  for (let i = 0; i < C * K; i++) {
    const c = i % K;
    if (largest[c]! > 0 && Math.abs(ref.richardson[i]! - ref.exact[i]!) > KINK * largest[c]!) {
      mask[i] = 1;
      count++;
    }
  }
  return { mask, count };
}

/** Finite differences (Richardson at the default steps unless `options` say otherwise). */
async function sense(model: string, site: string, kind: 'gain' | 'offset', options: { method?: SenseMethod; step?: number } = {}): Promise<SiteSensitivity> {
  const result = await senseSites({ model: join(FIXTURES, `${model}.onnx`), stimuli: join(FIXTURES, 'inputs.npy'), site, kind, threads: 1, method: 'richardson', ...options });
  return result.sites[0]!;
}

describe('senseSites vs PyTorch float64 finite differences at the same steps', () => {
  for (const m of MODELS) {
    it(`senseSites --method secant --step 0.01 on ${m.name} (${m.what}) matches PyTorch's float64 secant within 2e-3, gain and offset`, async () => {
      for (const kind of KINDS) {
        const ref = reference(m.name, kind);
        expect(ref.step).toBe(0.01);
        const s = await sense(m.name, ref.site, kind, { method: 'secant', step: 0.01 });
        expect([s.channels, s.categories.length]).toEqual([m.channels, m.outputs]);
        expect(worstRelative(s.sensitivity, ref.secant, ref.exact, m.channels, m.outputs), kind).toBeLessThanOrEqual(2e-3);
      }
    });
  }

  for (const m of MODELS) {
    it(`senseSites --method richardson on ${m.name} runs at steps h and h/2 (h = ${defaultStep('gain')} for gains, ${defaultStep('offset')} for offsets) and match PyTorch's float64 Richardson within ${RICHARDSON_ROUNDING}`, async () => {
      for (const kind of KINDS) {
        const ref = reference(m.name, kind);
        expect(ref.richardsonStep).toBe(defaultStep(kind)); // the fixtures were made for Sonde's default steps
        const s = await sense(m.name, ref.site, kind);
        expect([s.method, s.step]).toEqual(['richardson', defaultStep(kind)]);
        // what is left is float32 rounding, ~ε·|y|/h amplified by the extrapolation's weights 4/3 and 1/3
        expect(worstRelative(s.sensitivity, ref.richardson, ref.exact, m.channels, m.outputs), kind).toBeLessThanOrEqual(RICHARDSON_ROUNDING);
      }
    });
  }
});

describe('senseSites --method richardson vs PyTorch autograd', () => {
  for (const m of MODELS) {
    it(`senseSites --method richardson on ${m.name} (${m.what}) agrees with autograd within ${m.autograd.gain} (gain) and ${m.autograd.offset} (offset) of each category's largest value, away from ${m.kinks.gain + m.kinks.offset} kinked entries`, async () => {
      for (const kind of KINDS) {
        const ref = reference(m.name, kind);
        const s = await sense(m.name, ref.site, kind);
        const kinks = kinked(ref, m.channels, m.outputs);
        expect(kinks.count, `${kind}: entries with a kink within the step`).toBe(m.kinks[kind]);
        expect(worstRelative(s.sensitivity, ref.exact, ref.exact, m.channels, m.outputs, kinks.mask), kind).toBeLessThanOrEqual(m.autograd[kind]);
        // everywhere, kinks included
        expect(worstRelative(s.sensitivity, ref.exact, ref.exact, m.channels, m.outputs), kind).toBeLessThanOrEqual(OUTRIGHT);
      }
    });
  }

  it('senseSites --method richardson gain values on the bias-free network sum over channels to the mean logits (Euler, degree-1 homogeneity; logits from PyTorch fc.npy)', async () => {
    // Euler's theorem: a positively homogeneous f of degree 1 satisfies Σ_k g_k ∂f/∂g_k = f at g = 1.
    const ref = reference('homogeneous', 'gain');
    const s = await sense('homogeneous', ref.site, 'gain');
    const logits = parseNpy(readFileSync(join(FIXTURES, 'homogeneous', 'fc.npy'))).data as Float32Array; // [4, 10]
    let largest = 0;
    for (let i = 0; i < logits.length; i++) largest = Math.max(largest, Math.abs(logits[i]!));
    for (let c = 0; c < 10; c++) {
      let sum = 0;
      for (let k = 0; k < s.channels; k++) sum += s.sensitivity[k * 10 + c]!;
      let mean = 0;
      for (let n = 0; n < 4; n++) mean += logits[n * 10 + c]! / 4;
      // finite differences, not exact derivatives: a kink crossed by the step moves each term slightly
      expect(Math.abs(sum - mean) / largest, `category ${c}`).toBeLessThanOrEqual(EULER);
    }
  });
});
