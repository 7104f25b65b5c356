/**
 * The feature-similarity-gain signature of a modulation at one layer: channels ranked by their tuning
 * for the attended category (most preferred first), and the activity ratio (modulated ÷ baseline mean
 * response) fitted against the normalised rank by least squares. Under feature-similarity gain the
 * preferring channels are scaled up and the others down, so the line has an intercept above 1 and a
 * negative slope (../shared/DOMAIN.md; common practice in the attention literature).
 */

import { UsageError } from '../errors.js';
import { bootstrapIntervals } from '../stats/bootstrap.js';
import { averageRanks, linearFit, spearman } from '../stats/correlation.js';

/** Input of `fitSignature`. */
export interface SignatureInput {
  /** Baseline per-stimulus channel means a_nk, [N, C] row-major (n*C + k). */
  baseChannelMeans: Float32Array | Float64Array;
  /** Modulated per-stimulus channel means b_nk, same layout and stimuli. */
  modChannelMeans: Float32Array | Float64Array;
  /** N. */
  stimuli: number;
  /** C. */
  channels: number;
  /** t_k, each channel's tuning value for the target category, [C]. */
  tuning: Float64Array;
  /** Bootstrap over stimuli (rows) for confidence intervals of slope and intercept; omitted → no intervals. */
  bootstrap?: { resamples: number; seed: number | string; level?: number };
  /** A channel is "enhanced" when its ratio exceeds 1 + tolerance; default 0.01. */
  tolerance?: number;
}

/** The signature at one layer. */
export interface SignatureFit {
  /** Slope of activity ratio against normalised rank ρ (negative = preferring channels gain more). */
  slope: number;
  /** Intercept: the fitted ratio of the most preferred channel (ρ = 0). */
  intercept: number;
  /** Pearson r of ratio against ρ. */
  r: number;
  /** Channels in the fit. */
  n: number;
  /** Percentile bootstrap intervals over stimuli, or null when no bootstrap was asked for. */
  ci: {
    slope: [number, number];
    intercept: [number, number];
    level: number;
    resamples: number;
    /** Replicates with a non-finite slope (e.g. a resample where too few channels remained), excluded. */
    excluded: number;
  } | null;
  /**
   * Fraction of the non-preferring channels (tuning < 0) whose ratio exceeds 1 + tolerance: channels enhanced
   * regardless of their preference, as feature matching predicts and feature-similarity gain does not.
   * NaN when no such channel is in the fit, or one of them has a NaN ratio.
   */
  featureMatchingFraction: number;
  /**
   * Spearman rank correlation between tuning value and activity ratio over the fitted channels (our
   * definition): +1 when the more a channel prefers the target the more it is enhanced, which is the
   * ordering feature-similarity gain predicts; ≈ 0 for a uniform or unrelated change.
   */
  featureSimilarityScore: number;
  /** ρ_k = rank_k / (C′ − 1) ∈ [0, 1], rank 0 the most preferred (ties share their average rank); NaN for excluded tuning. [C]. */
  normalisedRank: Float64Array;
  /** Activity ratio mean_n b_nk / mean_n a_nk; NaN where the baseline mean is exactly 0. [C]. */
  ratio: Float64Array;
  /** Channels left out: non-finite tuning (not ranked), and exactly-zero baseline mean (ranked, not fitted). */
  excludedChannels: { tuning: number; baseline: number };
}

/**
 * Fits the feature-similarity-gain signature of one layer.
 *
 * @param input channel means of both runs, shape, tuning for the target, optional bootstrap, tolerance.
 * @returns slope, intercept, r, optional bootstrap CI, the feature-matching fraction and the
 *   feature-similarity score, with the per-channel ranks and ratios that went into them.
 * @throws UsageError when shapes disagree, fewer than 2 channels have a finite tuning value, or the
 *   tolerance or bootstrap options are invalid.
 * Edge cases: ranks are computed once over the channels with finite tuning (C′ of them), before any channel
 * is dropped for a zero baseline, so ρ is the channel's place in the layer's tuning order; NaN/Inf channel
 * means are not skipped and make the affected ratios, and so the fit, NaN.
 */
export function fitSignature(input: SignatureInput): SignatureFit {
  const { baseChannelMeans, modChannelMeans, stimuli: N, channels: C, tuning } = input;
  const tolerance = input.tolerance ?? 0.01;
  checkInput(input, tolerance);

  // Rank by tuning, most preferred first: average ranks of −t over the finite entries, minus 1.
  const rankedChannels: number[] = [];
  for (let k = 0; k < C; k++) if (Number.isFinite(tuning[k]!)) rankedChannels.push(k);
  const ranked = rankedChannels.length;
  if (ranked < 2) {
    throw new UsageError('E_SIGNATURE_TUNING', `signature needs at least 2 channels with a finite tuning value, got ${ranked} of ${C}`, {
      hint: 'check the tuning table for this layer and target',
    });
  }
  const negated = new Float64Array(ranked);
  for (let i = 0; i < ranked; i++) negated[i] = -tuning[rankedChannels[i]!]!;
  const ranks = averageRanks(negated);
  const normalisedRank = new Float64Array(C).fill(Number.NaN);
  for (let i = 0; i < ranked; i++) normalisedRank[rankedChannels[i]!] = (ranks[i]! - 1) / (ranked - 1);

  const sumsA = new Float64Array(C);
  const sumsB = new Float64Array(C);
  const ratio = new Float64Array(C);
  const fitX = new Float64Array(ranked);
  const fitY = new Float64Array(ranked);
  const fitT = new Float64Array(ranked);

  /** Channel ratios over the rows in `rows`, then the fit; returns the number of fitted channels. */
  const fitRows = (rows: Int32Array): { fitted: number; zeroBaseline: number } => {
    sumsA.fill(0);
    sumsB.fill(0);
    for (let r = 0; r < rows.length; r++) {
      const row = rows[r]! * C; // [N, C]: i = n*C + k
      for (let k = 0; k < C; k++) {
        sumsA[k] += baseChannelMeans[row + k]!;
        sumsB[k] += modChannelMeans[row + k]!;
      }
    }
    let fitted = 0;
    let zeroBaseline = 0;
    for (let i = 0; i < ranked; i++) {
      const k = rankedChannels[i]!;
      const a = sumsA[k]!;
      if (a === 0) {
        ratio[k] = Number.NaN;
        zeroBaseline++;
        continue;
      }
      const value = sumsB[k]! / a;
      ratio[k] = value;
      fitX[fitted] = normalisedRank[k]!;
      fitY[fitted] = value;
      fitT[fitted] = tuning[k]!;
      fitted++;
    }
    return { fitted, zeroBaseline };
  };

  const all = new Int32Array(N);
  for (let n = 0; n < N; n++) all[n] = n;
  const { fitted, zeroBaseline } = fitRows(all);
  const x = fitX.subarray(0, fitted);
  const y = fitY.subarray(0, fitted);
  const line = linearFit(x, y);
  const featureSimilarityScore = spearman(fitT.subarray(0, fitted), y);
  let nonPreferring = 0;
  let enhanced = 0;
  let ratioNaN = false;
  for (let i = 0; i < fitted; i++) {
    if (fitT[i]! < 0) {
      nonPreferring++;
      if (Number.isNaN(fitY[i]!)) ratioNaN = true;
      if (fitY[i]! > 1 + tolerance) enhanced++;
    }
  }
  const featureMatchingFraction = nonPreferring > 0 && !ratioNaN ? enhanced / nonPreferring : Number.NaN;
  const ratioOut = Float64Array.from(ratio);
  for (let k = 0; k < C; k++) if (!Number.isFinite(tuning[k]!)) ratioOut[k] = sumsA[k] === 0 ? Number.NaN : sumsB[k]! / sumsA[k]!;

  let ci: SignatureFit['ci'] = null;
  if (input.bootstrap !== undefined) {
    const { resamples, seed, level } = input.bootstrap;
    const [slopeCi, interceptCi] = bootstrapIntervals(
      N,
      (rows, out) => {
        const replicate = fitRows(rows);
        const fit = linearFit(fitX.subarray(0, replicate.fitted), fitY.subarray(0, replicate.fitted));
        out[0] = fit.slope;
        out[1] = fit.intercept;
      },
      2,
      level === undefined ? { resamples, seed } : { resamples, seed, level },
    );
    ci = {
      slope: [slopeCi!.low, slopeCi!.high],
      intercept: [interceptCi!.low, interceptCi!.high],
      level: slopeCi!.level,
      resamples,
      excluded: slopeCi!.excluded,
    };
  }
  return {
    slope: line.slope,
    intercept: line.intercept,
    r: line.r,
    n: fitted,
    ci,
    featureMatchingFraction,
    featureSimilarityScore,
    normalisedRank,
    ratio: ratioOut,
    excludedChannels: { tuning: C - ranked, baseline: zeroBaseline },
  };
}

function checkInput(input: SignatureInput, tolerance: number): void {
  const { baseChannelMeans, modChannelMeans, stimuli: N, channels: C, tuning } = input;
  if (!Number.isInteger(N) || N < 1 || !Number.isInteger(C) || C < 1) {
    throw new UsageError('E_SIGNATURE_SHAPE', `signature shape stimuli = ${N}, channels = ${C} must be positive integers`);
  }
  for (const [name, data] of [
    ['baseChannelMeans', baseChannelMeans],
    ['modChannelMeans', modChannelMeans],
  ] as const) {
    if (data.length !== N * C) {
      throw new UsageError('E_SIGNATURE_SHAPE', `signature ${name} has ${data.length} values but stimuli × channels = ${N} × ${C} = ${N * C}`);
    }
  }
  if (tuning.length !== C) {
    throw new UsageError('E_SIGNATURE_SHAPE', `signature tuning has ${tuning.length} values but the layer has ${C} channels`, {
      hint: 'pass the tuning column of this layer for the target category',
    });
  }
  if (!(tolerance >= 0) || !Number.isFinite(tolerance)) {
    throw new UsageError('E_SIGNATURE_OPTION', `signature tolerance = ${String(tolerance)} is not a finite number ≥ 0`);
  }
}
