import { describe, expect, it } from 'vitest';
import { LayerDiffAccumulator } from '../../src/analysis/layer-diff.js';
import type { LayerDiffMetrics } from '../../src/analysis/layer-diff-metrics.js';
import { UsageError } from '../../src/errors.js';
import { createRandom } from '../../src/random.js';
import { torchReference, TORCH } from '../helpers/torch-reference.js';


const N = 10;
const C = 4;
const S = 6; // H × W = 2 × 3
const E = C * S;

/** Seeded post-ReLU-like activations and a modulated copy: per-channel gain plus noise, clamped at 0. */
function makeLayer(seed: number, stimuli = N, channels = C, spatial = S): { base: Float32Array; mod: Float32Array } {
  const random = createRandom(seed);
  const elements = channels * spatial;
  const base = new Float32Array(stimuli * elements);
  const mod = new Float32Array(stimuli * elements);
  for (let n = 0; n < stimuli; n++) {
    for (let k = 0; k < channels; k++) {
      const gain = 0.8 + 0.1 * k;
      for (let s = 0; s < spatial; s++) {
        const i = n * elements + k * spatial + s;
        base[i] = Math.max(0, 1 + k + random.normal());
        mod[i] = Math.max(0, base[i]! * gain + 0.05 * random.normal());
      }
    }
  }
  return { base, mod };
}

/** The same metrics computed directly from whole arrays with textbook formulas (two-pass, in doubles). */
function direct(base: Float32Array, mod: Float32Array, stimuli: number, channels: number, spatial: number) {
  const elements = channels * spatial;
  let aa = 0;
  let bb = 0;
  let ab = 0;
  let dd = 0;
  let sa = 0;
  let sb = 0;
  for (let i = 0; i < base.length; i++) {
    aa += base[i]! ** 2;
    bb += mod[i]! ** 2;
    ab += base[i]! * mod[i]!;
    dd += (mod[i]! - base[i]!) ** 2;
    sa += base[i]!;
    sb += mod[i]!;
  }
  const ma = sa / base.length;
  const mb = sb / base.length;
  let caa = 0;
  let cbb = 0;
  let cab = 0;
  for (let i = 0; i < base.length; i++) {
    caa += (base[i]! - ma) ** 2;
    cbb += (mod[i]! - mb) ** 2;
    cab += (base[i]! - ma) * (mod[i]! - mb);
  }
  const perStimulus: number[] = [];
  const channelMeanA = new Float64Array(stimuli * channels);
  const channelMeanB = new Float64Array(stimuli * channels);
  for (let n = 0; n < stimuli; n++) {
    let na = 0;
    let nd = 0;
    for (let e = 0; e < elements; e++) {
      const i = n * elements + e;
      na += base[i]! ** 2;
      nd += (mod[i]! - base[i]!) ** 2;
      channelMeanA[n * channels + Math.floor(e / spatial)] += base[i]! / spatial;
      channelMeanB[n * channels + Math.floor(e / spatial)] += mod[i]! / spatial;
    }
    perStimulus.push(Math.sqrt(nd) / Math.sqrt(na));
  }
  perStimulus.sort((x, y) => x - y);
  const mid = perStimulus.length >> 1;
  const medianChange = perStimulus.length % 2 ? perStimulus[mid]! : (perStimulus[mid - 1]! + perStimulus[mid]!) / 2;
  const ratio: number[] = [];
  const effect: number[] = [];
  for (let k = 0; k < channels; k++) {
    let sumA = 0;
    let sumB = 0;
    for (let n = 0; n < stimuli; n++) {
      sumA += channelMeanA[n * channels + k]!;
      sumB += channelMeanB[n * channels + k]!;
    }
    ratio.push(sumB / sumA);
    const meanA = sumA / stimuli;
    let ss = 0;
    for (let n = 0; n < stimuli; n++) ss += (channelMeanA[n * channels + k]! - meanA) ** 2;
    effect.push((sumB / stimuli - meanA) / Math.sqrt(ss / (stimuli - 1)));
  }
  const ratioMean = ratio.reduce((x, y) => x + y, 0) / channels;
  const ratioSd = Math.sqrt(ratio.reduce((x, y) => x + (y - ratioMean) ** 2, 0) / (channels - 1));
  return {
    relativeChange: Math.sqrt(dd) / Math.sqrt(aa),
    relativeChangeMedian: medianChange,
    cosine: ab / Math.sqrt(aa * bb),
    pearson: cab / Math.sqrt(caa * cbb),
    ratio,
    ratioMean,
    ratioSd,
    effect,
    effectSize: effect.reduce((x, y) => x + Math.abs(y), 0) / channels,
    channelMeanA,
    channelMeanB,
  };
}

function stream(base: Float32Array, mod: Float32Array, stimuli: number, batch: number, channels = C, spatial = S): LayerDiffAccumulator {
  const elements = channels * spatial;
  const accumulator = new LayerDiffAccumulator({ elements, channels, spatial, expectedStimuli: 2 });
  for (let start = 0; start < stimuli; start += batch) {
    const rows = Math.min(batch, stimuli - start);
    accumulator.add(base.subarray(start * elements, (start + rows) * elements), mod.subarray(start * elements, (start + rows) * elements), rows);
  }
  return accumulator;
}

function expectClose(actual: number, expected: number, relative: number, label: string): void {
  expect(Math.abs(actual - expected), label).toBeLessThanOrEqual(relative * Math.max(Math.abs(expected), 1e-300));
}

function expectMatchesDirect(metrics: LayerDiffMetrics, reference: ReturnType<typeof direct>): void {
  expectClose(metrics.relativeChange, reference.relativeChange, 1e-12, 'relativeChange');
  expectClose(metrics.relativeChangeMedian, reference.relativeChangeMedian, 1e-12, 'relativeChangeMedian');
  expectClose(metrics.cosine, reference.cosine, 1e-12, 'cosine');
  expectClose(metrics.pearson, reference.pearson, 1e-12, 'pearson');
  reference.ratio.forEach((r, k) => expectClose(metrics.channelRatio[k]!, r, 1e-12, `channelRatio[${k}]`));
  expectClose(metrics.channelRatioMean, reference.ratioMean, 1e-12, 'channelRatioMean');
  expectClose(metrics.channelRatioSd, reference.ratioSd, 1e-10, 'channelRatioSd');
  reference.effect.forEach((d, k) => expectClose(metrics.channelEffectSize[k]!, d, 1e-10, `channelEffectSize[${k}]`));
  expectClose(metrics.effectSize, reference.effectSize, 1e-10, 'effectSize');
}

describe('LayerDiffAccumulator', () => {
  it('LayerDiffAccumulator.add() in batches of 3 equals a direct whole-array computation', () => {
    const { base, mod } = makeLayer(1);
    const metrics = stream(base, mod, N, 3).finish();
    const reference = direct(base, mod, N, C, S);
    expect(metrics.stimuli).toBe(N);
    expectMatchesDirect(metrics, reference);
    // Gains 0.8, 0.9, 1.0, 1.1 per channel: one down, one up beyond ±1%, one (≈1.0) in between, one ≈0.9 down.
    expect(metrics.fractionDown).toBe(0.5);
    expect(metrics.fractionUp).toBe(0.25);
    expect(metrics.nonFinite).toEqual({ base: 0, mod: 0 });
    expect(metrics.channelRatioExcluded).toBe(0);
    expect(metrics.effectSizeExcluded).toBe(0);
  });

  it('LayerDiffAccumulator on a signed layer shows no channel ratio and counts mean shifts beyond tolerance × the RMS channel mean (hand-computed)', () => {
    // 2 stimuli × 4 channels, one value each; baseline channel means −1, 2, 0.001, −3 (RMS √(14.000001 / 4) ≈ 1.8708)
    const base = Float32Array.of(-1, 2, 0.001, -3, -1, 2, 0.001, -3);
    // shifts +0.5, −0.01, +0.2, 0 — a ratio of means would read 0.5, 0.995, 201, 1 (the third meaningless)
    const mod = Float32Array.of(-0.5, 1.99, 0.201, -3, -0.5, 1.99, 0.201, -3);
    const accumulator = new LayerDiffAccumulator({ elements: 4, channels: 4, spatial: 1, tolerance: 0.01, expectedStimuli: 2 });
    accumulator.add(base, mod, 2);
    const metrics = accumulator.finish();
    expect(metrics.signed).toBe(true);
    expect(metrics.channelRatioMean).toBeNaN();
    expect(metrics.channelRatioSd).toBeNaN();
    // tolerance × RMS ≈ 0.0187: +0.5 and +0.2 are up, −0.01 is within, 0 is within
    expect(metrics.fractionUp).toBe(0.5);
    expect(metrics.fractionDown).toBe(0);
    // a non-negative layer keeps its ratios
    const plain = new LayerDiffAccumulator({ elements: 2, channels: 2, spatial: 1, expectedStimuli: 1 });
    plain.add(Float32Array.of(1, 2), Float32Array.of(2, 2), 1);
    expect(plain.finish()).toMatchObject({ signed: false, channelRatioMean: 1.5 });
  });

  it('LayerDiffAccumulator.add() with spatial = 1 (vector layer) equals the direct computation', () => {
    const { base, mod } = makeLayer(2, 9, 12, 1);
    expectMatchesDirect(stream(base, mod, 9, 3, 12, 1).finish(), direct(base, mod, 9, 12, 1));
  });

  it.skipIf(!TORCH)('LayerDiffAccumulator.finish() matches torch norm, cosine_similarity and corrcoef on the flattened layer', () => {
    // Independent reference: PyTorch (Debian python3-torch) in float64 on the same float32 values.
    const { base, mod } = makeLayer(3, 13, 5, 16);
    const [relative, cosine, pearson, ratios] = torchReference(
      'import json, sys, torch\nd = json.load(sys.stdin)\na = torch.tensor(d["a"], dtype=torch.float64)\nb = torch.tensor(d["b"], dtype=torch.float64)\n' +
        'rel = (torch.linalg.norm(b - a) / torch.linalg.norm(a)).item()\ncos = torch.nn.functional.cosine_similarity(a, b, dim=0, eps=0).item()\n' +
        'r = torch.corrcoef(torch.stack([a, b]))[0, 1].item()\nA = a.reshape(13, 5, 16)\nB = b.reshape(13, 5, 16)\n' +
        'ratio = (B.mean(dim=(0, 2)) / A.mean(dim=(0, 2))).tolist()\nprint(json.dumps([rel, cos, r, ratio]))',
      { a: Array.from(base), b: Array.from(mod) },
    ) as [number, number, number, number[]];
    const metrics = stream(base, mod, 13, 3, 5, 16).finish();
    expectClose(metrics.relativeChange, relative, 1e-12, 'relativeChange');
    expectClose(metrics.cosine, cosine, 1e-12, 'cosine');
    expectClose(metrics.pearson, pearson, 1e-12, 'pearson');
    ratios.forEach((r, k) => expectClose(metrics.channelRatio[k]!, r, 1e-12, `channelRatio[${k}]`));
  });

  it('LayerDiffAccumulator.merge() of two shards equals one stream over all stimuli', () => {
    const { base, mod } = makeLayer(4);
    const whole = stream(base, mod, N, 4);
    const first = stream(base.subarray(0, 6 * E), mod.subarray(0, 6 * E), 6, 3);
    const second = stream(base.subarray(6 * E), mod.subarray(6 * E), N - 6, 3);
    first.merge(second);
    const merged = first.finish();
    const reference = whole.finish();
    expect(merged.stimuli).toBe(N);
    for (const key of ['relativeChange', 'relativeChangeMedian', 'cosine', 'pearson', 'channelRatioMean', 'channelRatioSd', 'effectSize'] as const) {
      expectClose(merged[key], reference[key], 1e-12, key);
    }
    // The per-stimulus vectors are concatenated, so they are identical.
    expect(first.channelMeans().base).toEqual(whole.channelMeans().base);
    expect(first.channelMeans().mod).toEqual(whole.channelMeans().mod);
  });

  it('LayerDiffAccumulator(a vs a) gives relative change 0, cosine 1, Pearson 1 and ratios 1 exactly', () => {
    // Exact property: a snapshot diffed with itself shows no change.
    const { base } = makeLayer(5);
    const metrics = stream(base, base, N, 3).finish();
    expect(metrics.relativeChange).toBe(0);
    expect(metrics.relativeChangeMedian).toBe(0);
    expect(metrics.cosine).toBe(1);
    expect(metrics.pearson).toBe(1);
    expect(Array.from(metrics.channelRatio)).toEqual(new Array(C).fill(1));
    expect(metrics.channelRatioSd).toBe(0);
    expect(metrics.fractionUp).toBe(0);
    expect(metrics.fractionDown).toBe(0);
    expect(metrics.effectSize).toBe(0);
  });

  it('LayerDiffAccumulator(a vs g·a) gives relative change |g − 1|, cosine 1 and ratios g', () => {
    // Exact property of a uniform gain g on non-negative input: b − a = (g − 1)a, so ‖b − a‖/‖a‖ = |g − 1|,
    // the angle is 0 and every channel ratio is g. For g = 2 and 0.5 (powers of two) every float32 product
    // is exact and so are the results; for g = 1.3 the float32 rounding of g·a allows ~1e-7.
    const { base } = makeLayer(6);
    for (const [g, tolerance] of [
      [2, 0],
      [0.5, 0],
      [1.3, 2e-7],
    ] as const) {
      const mod = base.map((a) => g * a);
      const metrics = stream(base, mod, N, 3).finish();
      expect(Math.abs(metrics.relativeChange - Math.abs(g - 1)), `g = ${g}`).toBeLessThanOrEqual(tolerance);
      expect(Math.abs(metrics.relativeChangeMedian - Math.abs(g - 1)), `g = ${g}`).toBeLessThanOrEqual(tolerance);
      expect(Math.abs(metrics.cosine - 1), `g = ${g}`).toBeLessThanOrEqual(tolerance);
      expect(Math.abs(metrics.pearson - 1), `g = ${g}`).toBeLessThanOrEqual(tolerance + 1e-15);
      for (const r of metrics.channelRatio) expect(Math.abs(r - g), `g = ${g}`).toBeLessThanOrEqual(tolerance * g);
      expect(metrics.fractionUp).toBe(g > 1 ? 1 : 0);
      expect(metrics.fractionDown).toBe(g < 1 ? 1 : 0);
    }
  });

  it('LayerDiffAccumulator.channelMeans() holds each stimulus channel mean of both sides', () => {
    const { base, mod } = makeLayer(7);
    const means = stream(base, mod, N, 3).channelMeans();
    const reference = direct(base, mod, N, C, S);
    expect(means.stimuli).toBe(N);
    expect(means.channels).toBe(C);
    for (let i = 0; i < N * C; i++) {
      expect(Math.abs(means.base[i]! - reference.channelMeanA[i]!)).toBeLessThanOrEqual(1e-6 * Math.abs(reference.channelMeanA[i]!) + 1e-30);
      expect(Math.abs(means.mod[i]! - reference.channelMeanB[i]!)).toBeLessThanOrEqual(1e-6 * Math.abs(reference.channelMeanB[i]!) + 1e-30);
    }
  });

  it('LayerDiffAccumulator.finish() counts NaN/Inf and turns the metrics they touch into NaN', () => {
    const { base, mod } = makeLayer(8);
    base[2 * E + 1 * S + 3] = Number.NaN; // stimulus 2, channel 1
    mod[5 * E + 1 * S + 0] = Number.POSITIVE_INFINITY; // stimulus 5, channel 1
    mod[7 * E + 1 * S + 2] = Number.NaN;
    const metrics = stream(base, mod, N, 3).finish();
    expect(metrics.nonFinite).toEqual({ base: 1, mod: 2 });
    expect(metrics.relativeChange).toBeNaN();
    expect(metrics.relativeChangeMedian).toBeNaN();
    expect(metrics.cosine).toBeNaN();
    expect(metrics.pearson).toBeNaN();
    expect(metrics.channelRatio[1]).toBeNaN();
    expect(Number.isFinite(metrics.channelRatio[0]!)).toBe(true);
    expect(metrics.channelRatioMean).toBeNaN();
    expect(metrics.fractionUp).toBeNaN();
    expect(metrics.channelEffectSize[1]).toBeNaN();
    expect(metrics.effectSize).toBeNaN();
    // The same with spatial = 1.
    const vector = new LayerDiffAccumulator({ elements: 3, channels: 3, spatial: 1 });
    vector.add(Float32Array.of(1, Number.NaN, 2, 1, 1, 1), Float32Array.of(1, 1, Number.NEGATIVE_INFINITY, 1, 1, 1), 2);
    expect(vector.finish().nonFinite).toEqual({ base: 1, mod: 1 });
  });

  it('LayerDiffAccumulator.finish() excludes and counts zero-baseline channels and zero-norm stimuli', () => {
    const { base, mod } = makeLayer(9);
    for (let n = 0; n < N; n++) base.fill(0, n * E + 2 * S, n * E + 3 * S); // channel 2 dead in the baseline
    base.fill(0, 4 * E, 5 * E); // stimulus 4 all zero on both sides
    mod.fill(0, 4 * E, 5 * E);
    const metrics = stream(base, mod, N, 3).finish();
    expect(metrics.channelRatio[2]).toBeNaN();
    expect(metrics.channelRatioExcluded).toBe(1);
    expect(Number.isFinite(metrics.channelRatioMean)).toBe(true);
    expect(metrics.channelEffectSize[2]).toBeNaN();
    expect(metrics.effectSizeExcluded).toBe(1);
    expect(Number.isFinite(metrics.effectSize)).toBe(true);
    expect(metrics.zeroNormStimuli).toBe(1);
    // 0/0 is "no change" (0), x/0 is +Infinity.
    const zero = new LayerDiffAccumulator({ elements: 2, channels: 2, spatial: 1 });
    zero.add(Float32Array.of(0, 0), Float32Array.of(0, 0), 1);
    expect(zero.finish().relativeChange).toBe(0);
    expect(zero.finish().cosine).toBeNaN();
    zero.add(Float32Array.of(0, 0), Float32Array.of(1, 0), 1);
    expect(zero.finish().relativeChange).toBe(Number.POSITIVE_INFINITY);
  });

  it('LayerDiffAccumulator({ keepChannelMeans: false }) gives the same metrics without keeping the means', () => {
    const { base, mod } = makeLayer(10, N, 6, 1);
    const kept = stream(base, mod, N, 3, 6, 1).finish();
    const lean = new LayerDiffAccumulator({ elements: 6, channels: 6, spatial: 1, keepChannelMeans: false });
    for (let start = 0; start < N; start += 4) {
      const rows = Math.min(4, N - start);
      lean.add(base.subarray(start * 6, (start + rows) * 6), mod.subarray(start * 6, (start + rows) * 6), rows);
    }
    const metrics = lean.finish();
    for (const key of ['relativeChange', 'relativeChangeMedian', 'cosine', 'pearson', 'channelRatioMean', 'effectSize'] as const) {
      expectClose(metrics[key], kept[key], 1e-12, key);
    }
    expect(() => lean.channelMeans()).toThrow(/channel means were not kept/);
  });

  it('LayerDiffAccumulator rejects inconsistent shapes, batches and merges', () => {
    expect(() => new LayerDiffAccumulator({ elements: 10, channels: 3, spatial: 3 })).toThrow(UsageError);
    expect(() => new LayerDiffAccumulator({ elements: 9, channels: 3, spatial: 3, tolerance: -1 })).toThrow(/tolerance = -1/);
    const accumulator = new LayerDiffAccumulator({ elements: 4, channels: 2, spatial: 2, layer: 'conv3' });
    expect(() => accumulator.finish()).toThrow(/conv3: no stimuli/);
    expect(() => accumulator.add(new Float32Array(8), new Float32Array(7), 2)).toThrow(/conv3: modulated batch has 7 values but rows × elements = 2 × 4 = 8/);
    expect(() => accumulator.add(new Float32Array(4), new Float32Array(4), 1.5)).toThrow(UsageError);
    expect(() => accumulator.merge(new LayerDiffAccumulator({ elements: 4, channels: 4, spatial: 1 }))).toThrow(/cannot merge/);
    expect(() => accumulator.merge(accumulator)).toThrow(/itself/);
  });
});
