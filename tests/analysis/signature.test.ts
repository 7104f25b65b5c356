import { describe, expect, it } from 'vitest';
import { fitSignature } from '../../src/analysis/signature.js';
import { UsageError } from '../../src/errors.js';
import { createRandom } from '../../src/random.js';

const N = 8;
const C = 6;
// Tuning for the target; descending order is channel 2, 5, 0, 3, 4, 1, so ρ = rank / 5 is:
const TUNING = Float64Array.of(0.3, -1.2, 2.0, 0.0, -0.5, 1.1);
const RHO = [2 / 5, 1, 0, 3 / 5, 4 / 5, 1 / 5];

/** Baseline channel means that vary over stimuli and channels, and a modulated copy scaled by gain(k). */
function layer(gain: (k: number) => number, type: 'f32' | 'f64' = 'f64', noise = 0): { base: Float64Array | Float32Array; mod: Float64Array | Float32Array } {
  const random = createRandom('signature');
  const make = (size: number): Float64Array | Float32Array => (type === 'f32' ? new Float32Array(size) : new Float64Array(size));
  const base = make(N * C);
  const mod = make(N * C);
  for (let n = 0; n < N; n++) {
    for (let k = 0; k < C; k++) {
      base[n * C + k] = 1 + n + 0.5 * k;
      mod[n * C + k] = base[n * C + k]! * gain(k) * (1 + noise * random.normal());
    }
  }
  return { base, mod };
}

describe('fitSignature', () => {
  it('fitSignature(ratio = 1.2 − 0.4ρ) gives slope −0.4 and intercept 1.2', () => {
    // Exact property of least squares: points on a line give that line back. With float64 channel means the
    // only error is rounding (1e-12); the ratios must come back per channel too.
    const { base, mod } = layer((k) => 1.2 - 0.4 * RHO[k]!);
    const fit = fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning: TUNING });
    expect(Math.abs(fit.slope + 0.4)).toBeLessThan(1e-12);
    expect(Math.abs(fit.intercept - 1.2)).toBeLessThan(1e-12);
    expect(Math.abs(fit.r + 1)).toBeLessThan(1e-12);
    expect(fit.n).toBe(C);
    expect(fit.ci).toBeNull();
    RHO.forEach((rho, k) => {
      expect(fit.normalisedRank[k]).toBeCloseTo(rho, 15);
      expect(Math.abs(fit.ratio[k]! - (1.2 - 0.4 * rho))).toBeLessThan(1e-12);
    });
    // Non-preferring channels (t < 0: channels 1 and 4) have ratios 0.8 and 0.88, so none is enhanced;
    // the ratio rises with tuning everywhere, so the rank correlation is +1.
    expect(fit.featureMatchingFraction).toBe(0);
    expect(fit.featureSimilarityScore).toBeCloseTo(1, 14);
    expect(fit.excludedChannels).toEqual({ tuning: 0, baseline: 0 });
    // The same from float32 channel means (what the layer diff keeps): float32 rounding only, 1e-6.
    const f32 = layer((k) => 1.2 - 0.4 * RHO[k]!, 'f32');
    const fit32 = fitSignature({ baseChannelMeans: f32.base, modChannelMeans: f32.mod, stimuli: N, channels: C, tuning: TUNING });
    expect(Math.abs(fit32.slope + 0.4)).toBeLessThan(1e-6);
    expect(Math.abs(fit32.intercept - 1.2)).toBeLessThan(1e-6);
  });

  it('fitSignature(uniform gain g) gives slope 0 and intercept g', () => {
    // Exact property: equal ratios for every channel give a flat line at g (r is undefined: NaN). Every
    // non-preferring channel is enhanced, which is what the feature-matching fraction measures.
    for (const g of [1.25, 0.75]) {
      const { base, mod } = layer(() => g);
      const fit = fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning: TUNING });
      expect(Math.abs(fit.slope)).toBeLessThan(1e-12);
      expect(Math.abs(fit.intercept - g)).toBeLessThan(1e-12);
      expect(fit.featureMatchingFraction).toBe(g > 1 ? 1 : 0);
    }
  });

  it('fitSignature(tuning with ties) gives tied channels their average rank', () => {
    // Average ranks of the descending order 1, 1, 0, −1: positions 0 and 1 share 0.5, then 2 and 3; ρ = rank / 3.
    const base = Float64Array.of(1, 1, 1, 1);
    const fit = fitSignature({ baseChannelMeans: base, modChannelMeans: base, stimuli: 1, channels: 4, tuning: Float64Array.of(1, 1, 0, -1) });
    expect(Array.from(fit.normalisedRank)).toEqual([0.5 / 3, 0.5 / 3, 2 / 3, 1]);
  });

  it('fitSignature({ bootstrap }) is reproducible, brackets the estimate and collapses when every stimulus agrees', () => {
    // Exact property: when each stimulus has the same per-channel ratio, every resample has those ratios, so
    // the interval is the point estimate itself.
    const exact = layer((k) => 1.2 - 0.4 * RHO[k]!);
    const tight = fitSignature({ baseChannelMeans: exact.base, modChannelMeans: exact.mod, stimuli: N, channels: C, tuning: TUNING, bootstrap: { resamples: 200, seed: 5 } });
    expect(Math.abs(tight.ci!.slope[0] + 0.4)).toBeLessThan(1e-12);
    expect(Math.abs(tight.ci!.slope[1] + 0.4)).toBeLessThan(1e-12);
    expect(Math.abs(tight.ci!.intercept[0] - 1.2)).toBeLessThan(1e-12);
    expect(tight.ci!.excluded).toBe(0);
    const noisy = layer((k) => 1.2 - 0.4 * RHO[k]!, 'f64', 0.05);
    const input = { baseChannelMeans: noisy.base, modChannelMeans: noisy.mod, stimuli: N, channels: C, tuning: TUNING, bootstrap: { resamples: 500, seed: 'ci' } };
    const a = fitSignature(input);
    const b = fitSignature(input);
    expect(b.ci).toEqual(a.ci);
    expect(a.ci!.slope[0]).toBeLessThan(a.slope);
    expect(a.ci!.slope[1]).toBeGreaterThan(a.slope);
    expect(a.ci!.intercept[0]).toBeLessThan(a.intercept);
    expect(a.ci!.intercept[1]).toBeGreaterThan(a.intercept);
    expect(a.ci!.level).toBe(0.95);
    // The bootstrap must not disturb the point estimate's per-channel output.
    const plain = fitSignature({ ...input, bootstrap: undefined });
    expect(Array.from(a.ratio)).toEqual(Array.from(plain.ratio));
    expect(a.slope).toBe(plain.slope);
  });

  it('fitSignature(enhancement regardless of preference) reports feature-matching behaviour', () => {
    // Preferring channels ×1.3, non-preferring ×1.1: still a negative slope, but every non-preferring channel
    // is enhanced beyond 1 + tolerance, so the fraction is 1.
    const { base, mod } = layer((k) => (TUNING[k]! >= 0 ? 1.3 : 1.1));
    const fit = fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning: TUNING });
    expect(fit.slope).toBeLessThan(0);
    expect(fit.intercept).toBeGreaterThan(1);
    expect(fit.featureMatchingFraction).toBe(1);
    const strict = fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning: TUNING, tolerance: 0.2 });
    expect(strict.featureMatchingFraction).toBe(0);
  });

  it('fitSignature(input) counts channels without tuning or baseline and rejects bad input', () => {
    const { base, mod } = layer((k) => 1.2 - 0.4 * RHO[k]!);
    for (let n = 0; n < N; n++) base[n * C + 3] = 0; // channel 3: zero baseline (ranked, not fitted)
    const tuning = Float64Array.from(TUNING);
    tuning[1] = Number.NaN; // channel 1: no tuning value (not ranked)
    const fit = fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning });
    expect(fit.excludedChannels).toEqual({ tuning: 1, baseline: 1 });
    expect(fit.n).toBe(4);
    expect(fit.normalisedRank[1]).toBeNaN();
    expect(fit.normalisedRank[4]).toBe(1); // the least preferred of the 5 ranked channels
    expect(fit.ratio[3]).toBeNaN();
    expect(() => fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning: new Float64Array(C).fill(Number.NaN) })).toThrow(
      /at least 2 channels with a finite tuning value, got 0 of 6/,
    );
    expect(() => fitSignature({ baseChannelMeans: base, modChannelMeans: mod, stimuli: N, channels: C, tuning: TUNING.subarray(1) })).toThrow(UsageError);
    expect(() => fitSignature({ baseChannelMeans: base, modChannelMeans: mod.subarray(1), stimuli: N, channels: C, tuning: TUNING })).toThrow(/modChannelMeans has 47 values/);
  });
});
