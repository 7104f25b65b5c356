/**
 * The metrics of one layer's diff, from the moments a `LayerDiffAccumulator` (layer-diff.ts) gathers in
 * its single pass: pooled norms, cosine and Pearson correlation, channel activity ratios and their
 * spread, per-channel effect sizes. Each definition and its edge cases are on `LayerDiffMetrics`.
 */
import { median } from '../stats/describe.js';

/** Metrics of one layer, baseline a versus modulated b. */
export interface LayerDiffMetrics {
  /** Stimuli accumulated. */
  stimuli: number;
  /** E, C, S as given. */
  elements: number;
  channels: number;
  spatial: number;
  /** ‖b − a‖ / ‖a‖ over all elements of all stimuli. 0 when ‖a‖ = ‖b − a‖ = 0; +Infinity when only ‖a‖ = 0. */
  relativeChange: number;
  /** Median over stimuli of the per-stimulus ‖b_n − a_n‖ / ‖a_n‖ (same zero rule per stimulus). */
  relativeChangeMedian: number;
  /** Per-stimulus relative changes that had ‖a_n‖ = 0 (they are 0 or +Infinity by the zero rule, and counted here). */
  zeroNormStimuli: number;
  /** ⟨a, b⟩ / (‖a‖‖b‖) over all elements; NaN when either norm is 0. */
  cosine: number;
  /** Pearson correlation of a and b over all elements of all stimuli; NaN when either has zero variance. */
  pearson: number;
  /**
   * Per channel: mean of b over stimuli and positions ÷ mean of a. NaN where the baseline mean is exactly 0
   * (excluded, counted in `channelRatioExcluded`). [C].
   */
  channelRatio: Float64Array;
  /** Channels excluded from the ratio statistics because their baseline mean is exactly 0. */
  channelRatioExcluded: number;
  /**
   * Some baseline channel mean is negative (a Conv/Gemm output before its nonlinearity, a residual
   * stream): ratios of means near 0 or of opposite sign say nothing there, so `channelRatioMean`/`Sd`
   * are NaN (not shown) and `fractionUp`/`fractionDown` count channel mean shifts instead (see there).
   */
  signed: boolean;
  /** Mean of channelRatio over the included channels (NaN on a signed layer). */
  channelRatioMean: number;
  /** Sample sd (n − 1) of channelRatio over the included channels (NaN with fewer than 2). */
  channelRatioSd: number;
  /**
   * Fraction of included channels with ratio > 1 + tolerance (NaN if any included ratio is NaN); on a
   * signed layer, of all channels whose mean rose by more than tolerance × the root mean square of the
   * baseline channel means.
   */
  fractionUp: number;
  /** Fraction of included channels with ratio < 1 − tolerance (NaN if any included ratio is NaN). */
  fractionDown: number;
  /**
   * Per channel d_k = (mean_n b_nk − mean_n a_nk) / sd_n(a_nk), with a_nk, b_nk stimulus n's channel means and
   * sd the sample sd (n − 1) across stimuli of the baseline. NaN where sd is exactly 0 (excluded). [C].
   */
  channelEffectSize: Float64Array;
  /** Layer effect size: mean of |d_k| over the channels with sd ≠ 0 (NaN with fewer than 2 stimuli). */
  effectSize: number;
  /** Channels excluded from `effectSize` because their baseline sd across stimuli is exactly 0. */
  effectSizeExcluded: number;
  /** NaN/±Infinity elements seen in the baseline and the modulated activations. */
  nonFinite: { base: number; mod: number };
  /** The tolerance used for fractionUp / fractionDown. */
  tolerance: number;
}

/** What the metrics are computed from (the accumulator's moments; arrays are read, not kept). */
export interface LayerDiffMoments {
  /** N ≥ 1 stimuli; E, C, S as accumulated. */
  stimuli: number;
  elements: number;
  channels: number;
  spatial: number;
  /** Ratios beyond 1 ± tolerance count as up / down. */
  tolerance: number;
  /** Pooled Σa², Σb², Σab, Σ(b − a)² over all elements of all stimuli. */
  sumAA: number;
  sumBB: number;
  sumAB: number;
  sumDD: number;
  /** Pooled Pearson moments: M2 of a, M2 of b, co-moment. */
  pearsonM2A: number;
  pearsonM2B: number;
  pearsonCoMoment: number;
  /** Per channel across stimuli: mean and M2 of a_nk, mean of b_nk. [C] each. */
  channelMeanA: Float64Array;
  channelM2A: Float64Array;
  channelMeanB: Float64Array;
  /** Per-stimulus relative changes, [N]. */
  stimulusChange: Float64Array;
  zeroNormStimuli: number;
  nonFiniteBase: number;
  nonFiniteMod: number;
}

/**
 * The layer's metrics from its accumulated moments.
 * @param m the moments (N ≥ 1; the accumulator refuses to finish an empty layer).
 * @returns the metrics (see `LayerDiffMetrics` for each definition and its edge cases).
 */
export function layerDiffMetrics(m: LayerDiffMoments): LayerDiffMetrics {
  const N = m.stimuli;
  const C = m.channels;
  const { sumAA, sumBB, sumAB, sumDD } = m;
  const cosine = sumAA > 0 && sumBB > 0 ? clampUnit(sumAB / Math.sqrt(sumAA * sumBB)) : Number.NaN;
  const pearson =
    m.pearsonM2A > 0 && m.pearsonM2B > 0
      ? clampUnit(m.pearsonCoMoment / Math.sqrt(m.pearsonM2A * m.pearsonM2B))
      : Number.NaN;

  const channelRatio = new Float64Array(C);
  const channelEffectSize = new Float64Array(C);
  let ratioExcluded = 0;
  let ratioCount = 0;
  let ratioMean = 0;
  let ratioM2 = 0;
  let up = 0;
  let down = 0;
  let ratioNaN = false;
  let effectExcluded = 0;
  let effectSum = 0;
  for (let k = 0; k < C; k++) {
    const meanA = m.channelMeanA[k]!;
    const meanB = m.channelMeanB[k]!;
    if (meanA === 0) {
      channelRatio[k] = Number.NaN;
      ratioExcluded++;
    } else {
      const ratio = meanB / meanA;
      channelRatio[k] = ratio;
      ratioCount++;
      const delta = ratio - ratioMean;
      ratioMean += delta / ratioCount;
      ratioM2 += delta * (ratio - ratioMean);
      if (Number.isNaN(ratio)) ratioNaN = true;
      if (ratio > 1 + m.tolerance) up++;
      else if (ratio < 1 - m.tolerance) down++;
    }
    const sd = Math.sqrt(m.channelM2A[k]! / (N - 1));
    if (sd === 0) {
      channelEffectSize[k] = Number.NaN;
      effectExcluded++;
    } else {
      const d = (meanB - meanA) / sd;
      channelEffectSize[k] = d;
      effectSum += Math.abs(d);
    }
  }
  const effectCount = C - effectExcluded;
  let signed = false;
  let meanSquare = 0;
  for (let k = 0; k < C; k++) {
    const meanA = m.channelMeanA[k]!;
    if (meanA < 0) signed = true;
    meanSquare += meanA * meanA;
  }
  let shiftUp = 0;
  let shiftDown = 0;
  if (signed) {
    const scale = m.tolerance * Math.sqrt(meanSquare / C);
    for (let k = 0; k < C; k++) {
      const shift = m.channelMeanB[k]! - m.channelMeanA[k]!;
      if (shift > scale) shiftUp++;
      else if (shift < -scale) shiftDown++;
    }
  }
  return {
    stimuli: N,
    elements: m.elements,
    channels: C,
    spatial: m.spatial,
    relativeChange: relativeNorm(sumDD, sumAA),
    relativeChangeMedian: median(m.stimulusChange),
    zeroNormStimuli: m.zeroNormStimuli,
    cosine,
    pearson,
    channelRatio,
    channelRatioExcluded: ratioExcluded,
    signed,
    channelRatioMean: ratioCount > 0 && !signed ? ratioMean : Number.NaN,
    channelRatioSd: ratioCount > 1 && !signed ? Math.sqrt(ratioM2 / (ratioCount - 1)) : Number.NaN,
    fractionUp: signed ? shiftUp / C : ratioCount > 0 && !ratioNaN ? up / ratioCount : Number.NaN,
    fractionDown: signed ? shiftDown / C : ratioCount > 0 && !ratioNaN ? down / ratioCount : Number.NaN,
    channelEffectSize,
    effectSize: effectCount > 0 ? effectSum / effectCount : Number.NaN,
    effectSizeExcluded: effectExcluded,
    nonFinite: { base: m.nonFiniteBase, mod: m.nonFiniteMod },
    tolerance: m.tolerance,
  };
}

export /** √(diff²) / √(base²) with the zero rule: 0/0 → 0 (nothing changed), x/0 → +Infinity; NaN propagates. */
function relativeNorm(sumDiffSquares: number, sumBaseSquares: number): number {
  if (sumBaseSquares === 0) return sumDiffSquares === 0 ? 0 : sumDiffSquares > 0 ? Number.POSITIVE_INFINITY : Number.NaN;
  return Math.sqrt(sumDiffSquares) / Math.sqrt(sumBaseSquares);
}

/** Clamps a correlation that rounding pushed past ±1. */
function clampUnit(value: number): number {
  return value > 1 ? 1 : value < -1 ? -1 : value;
}
