/**
 * Category tuning of a layer's channels from per-stimulus channel means: per channel k and category c the
 * mean response r_kc over the stimuli that contain c, its standard error, and the tuning value
 * t_kc = (r_kc − mean_c r_kc) / sd_c(r_kc), a z-score across categories (see ../shared/DOMAIN.md,
 * "Tuning values"). Positive t: the channel responds more to c than to the average category.
 */

import { UsageError, closestHint } from '../errors.js';

/** Input of `computeTuning`. */
export interface TuningInput {
  /** Per-stimulus channel means, [N, C] row-major: stimulus n, channel k at n*C + k. */
  channelMeans: Float32Array | Float64Array;
  /** N, the number of stimuli (rows). */
  stimuli: number;
  /** C, the number of channels (columns). */
  channels: number;
  /** The labels of each stimulus (length N); a stimulus may carry several, or none. */
  labels: readonly (readonly string[])[];
  /** The K ≥ 2 categories to tune for, in output order; labels outside this list are ignored. */
  categories: readonly string[];
  /** Use only stimuli with exactly one (distinct) label; default false (multi-label stimuli count for each label). */
  singleLabel?: boolean;
}

/** Per channel × category tuning. Arrays [C, K] are row-major: channel k, category c at k*K + c. */
export interface TuningTable {
  /** C. */
  channels: number;
  /** The K categories, in the order of the columns. */
  categories: string[];
  /** r_kc, the mean channel response over the stimuli containing category c, [C, K]. */
  mean: Float64Array;
  /** Standard error of r_kc: sample sd (n − 1) over those stimuli / √n; NaN when n < 2. [C, K]. */
  sem: Float64Array;
  /** n_c, the number of stimuli that entered category c (the same for every channel), [K]. */
  count: Int32Array;
  /** t_kc, the z-score of r_kc across categories (population sd over the K categories), [C, K]. */
  tuning: Float64Array;
  /** 1 where channel k has (numerically) zero variance across categories; its tuning values are 0. [C]. */
  zeroVariance: Uint8Array;
  /** Index of the category with the largest r_kc (first on ties); −1 for zero-variance or NaN channels. [C]. */
  preferred: Int32Array;
  /**
   * Selectivity index (r_max − r_rest) / (r_max + r_rest), r_rest the mean over the other K − 1 categories:
   * 0 = no preference, 1 = responds to one category only. Defined for non-negative responses; NaN when any
   * r_kc < 0 or is NaN; 0 when all r_kc are 0. [C].
   */
  selectivity: Float64Array;
  /** Count of NaN/±Infinity inputs per channel among the stimuli used (such channels get NaN values). [C]. */
  nonFinite: Int32Array;
  /** Stimuli that entered at least one category. */
  stimuliUsed: number;
  /** Stimuli that entered none (no label among the categories, or several labels under singleLabel). */
  stimuliSkipped: number;
}

/**
 * Below this sd (relative to the channel's largest |r_kc|) the spread across categories is rounding noise
 * of the means, not tuning; such channels are flagged zero-variance. Common practice: a relative cut-off
 * a few orders above double rounding (1e-16) and far below any real tuning contrast.
 */
const ZERO_VARIANCE_RELATIVE = 1e-12;

/**
 * Tuning of every channel for every category.
 *
 * The sd in the tuning value is the population sd over the K category means (divide by K): our choice,
 * which makes Σ_c t_kc = 0 and Σ_c t_kc² = K for every channel that is not zero-variance. The
 * selectivity index is a contrast index of the common (a − b)/(a + b) form (common practice).
 *
 * @param input channel means, shape, labels, categories, singleLabel.
 * @returns the tuning table.
 * @throws UsageError when the shape does not match the data, labels has the wrong length, fewer than two
 *   categories are given, a category is repeated, or a category has no stimuli (named, with the labels
 *   that do occur).
 * Edge cases: a label repeated within one stimulus counts once; zero-variance channels get t = 0 and a flag;
 * NaN/Inf inputs are counted per channel and make that channel's means, tuning and selectivity NaN.
 */
export function computeTuning(input: TuningInput): TuningTable {
  return tuningFromMoments(accumulateTuning(input));
}

/**
 * What `computeTuning` accumulates before it derives the table: per channel × category the count, mean
 * and centred sum of squares (M2) of the channel means. Moments of disjoint stimulus sets combine
 * exactly with `mergeTuningMoments` (the shard map-reduce form of tuning).
 */
export interface TuningMoments {
  /** C. */
  channels: number;
  /** The K categories. */
  categories: string[];
  /** Whether only one-label stimuli were used. */
  singleLabel: boolean;
  /** n_c per category, [K]. */
  count: Int32Array;
  /** Running mean of channel k over category c's stimuli, [C, K] (k*K + c). */
  mean: Float64Array;
  /** Centred sum of squares for the same, [C, K]. */
  m2: Float64Array;
  /** NaN/Inf inputs per channel among the stimuli used, [C]. */
  nonFinite: Int32Array;
  stimuliUsed: number;
  stimuliSkipped: number;
  /** Labels that occur but are not categories, sorted (for the empty-category hint). */
  otherLabels: string[];
}

/**
 * Accumulates tuning moments (Welford per channel and category) without deriving the table.
 * @param input as for `computeTuning`.
 * @returns the moments; a category may still be empty here.
 * @throws UsageError for a shape or label-length mismatch, fewer than two categories, or a repeated one.
 */
export function accumulateTuning(input: TuningInput): TuningMoments {
  const { channelMeans, stimuli: N, channels: C, labels, categories } = input;
  const singleLabel = input.singleLabel ?? false;
  checkShape(channelMeans, N, C, labels);
  const K = categories.length;
  if (K < 2) {
    throw new UsageError('E_TUNING_CATEGORIES', `tuning needs at least 2 categories, got ${K}${K === 1 ? ` ("${categories[0]}")` : ''}`, {
      hint: 'a z-score across categories is undefined for fewer than two',
    });
  }
  const categoryIndex = new Map<string, number>();
  for (let c = 0; c < K; c++) {
    if (categoryIndex.has(categories[c]!)) {
      throw new UsageError('E_TUNING_CATEGORIES', `tuning category "${categories[c]}" is listed twice`);
    }
    categoryIndex.set(categories[c]!, c);
  }

  const count = new Int32Array(K);
  const mean = new Float64Array(C * K);
  const m2 = new Float64Array(C * K);
  const nonFinite = new Int32Array(C);
  const stimulusCategories: number[] = [];
  let stimuliUsed = 0;
  for (let n = 0; n < N; n++) {
    collectCategories(labels[n]!, categoryIndex, singleLabel, stimulusCategories);
    if (stimulusCategories.length === 0) continue;
    stimuliUsed++;
    const row = n * C; // [N, C]: i = n*C + k
    for (let k = 0; k < C; k++) {
      const x = channelMeans[row + k]!;
      if (!Number.isFinite(x)) nonFinite[k]++;
    }
    for (const c of stimulusCategories) {
      const seen = ++count[c];
      // [C, K]: j = k*K + c; Welford update of each channel's running mean and M2 for category c.
      for (let k = 0, j = c; k < C; k++, j += K) {
        const x = channelMeans[row + k]!;
        const delta = x - mean[j]!;
        mean[j] += delta / seen;
        m2[j] += delta * (x - mean[j]!);
      }
    }
  }
  const otherLabels = [...new Set(labels.flat())].filter((l) => !categoryIndex.has(l)).sort();
  return { channels: C, categories: [...categories], singleLabel, count, mean, m2, nonFinite, stimuliUsed, stimuliSkipped: N - stimuliUsed, otherLabels };
}

/**
 * Moments of `b` (a disjoint set of stimuli) folded into a copy of `a`: counts add, means and M2 combine
 * by the pairwise update of Chan, Golub & LeVeque (1979), exact up to rounding.
 * @throws UsageError when the channels, categories or singleLabel differ.
 */
export function mergeTuningMoments(a: TuningMoments, b: TuningMoments): TuningMoments {
  if (a.channels !== b.channels || a.categories.join('\n') !== b.categories.join('\n') || a.singleLabel !== b.singleLabel) {
    throw new UsageError('E_TUNING_MERGE', `cannot merge tuning moments of ${b.channels} channels × [${b.categories.join(', ')}] into ${a.channels} × [${a.categories.join(', ')}]`);
  }
  const C = a.channels;
  const K = a.categories.length;
  const count = new Int32Array(K);
  const mean = new Float64Array(C * K);
  const m2 = new Float64Array(C * K);
  for (let c = 0; c < K; c++) {
    const na = a.count[c]!;
    const nb = b.count[c]!;
    const n = na + nb;
    count[c] = n;
    for (let k = 0, j = c; k < C; k++, j += K) {
      // [C, K]: j = k*K + c
      if (nb === 0) {
        mean[j] = a.mean[j]!;
        m2[j] = a.m2[j]!;
      } else if (na === 0) {
        mean[j] = b.mean[j]!;
        m2[j] = b.m2[j]!;
      } else {
        const delta = b.mean[j]! - a.mean[j]!;
        mean[j] = a.mean[j]! + (delta * nb) / n;
        m2[j] = a.m2[j]! + b.m2[j]! + (delta * delta * na * nb) / n;
      }
    }
  }
  const nonFinite = new Int32Array(C);
  for (let k = 0; k < C; k++) nonFinite[k] = a.nonFinite[k]! + b.nonFinite[k]!;
  return {
    channels: C,
    categories: [...a.categories],
    singleLabel: a.singleLabel,
    count,
    mean,
    m2,
    nonFinite,
    stimuliUsed: a.stimuliUsed + b.stimuliUsed,
    stimuliSkipped: a.stimuliSkipped + b.stimuliSkipped,
    otherLabels: [...new Set([...a.otherLabels, ...b.otherLabels])].sort(),
  };
}

/**
 * Derives the tuning table from moments (the second half of `computeTuning`).
 * @throws UsageError when a category has no stimuli (named, with the labels that do occur).
 */
export function tuningFromMoments(moments: TuningMoments): TuningTable {
  const { channels: C, categories, count, mean, m2, nonFinite, stimuliUsed, singleLabel } = moments;
  const K = categories.length;
  const N = moments.stimuliUsed + moments.stimuliSkipped;
  for (let c = 0; c < K; c++) {
    if (count[c] === 0) {
      const near = closestHint(categories[c]!, moments.otherLabels);
      throw new UsageError(
        'E_TUNING_EMPTY_CATEGORY',
        `tuning category "${categories[c]}" has no stimuli${singleLabel ? ' with a single label' : ''} among ${N}`,
        { hint: near !== '' ? `labels not in the category list: ${near}` : singleLabel ? 'drop --single-label or add one-label stimuli' : 'add stimuli labelled with it or drop the category' },
      );
    }
  }

  const sem = new Float64Array(C * K);
  const tuning = new Float64Array(C * K);
  const zeroVariance = new Uint8Array(C);
  const preferred = new Int32Array(C);
  const selectivity = new Float64Array(C);
  for (let k = 0; k < C; k++) {
    const base = k * K;
    let sum = 0;
    let largest = 0;
    let best = -1;
    let bestValue = Number.NEGATIVE_INFINITY;
    let negative = false;
    for (let c = 0; c < K; c++) {
      const r = mean[base + c]!;
      const n = count[c]!;
      sem[base + c] = n >= 2 ? Math.sqrt(m2[base + c]! / (n - 1) / n) : Number.NaN;
      sum += r;
      if (Math.abs(r) > largest) largest = Math.abs(r);
      if (r > bestValue) {
        bestValue = r;
        best = c;
      }
      if (r < 0) negative = true;
    }
    const centre = sum / K;
    let squares = 0;
    for (let c = 0; c < K; c++) {
      const d = mean[base + c]! - centre;
      squares += d * d;
    }
    const sd = Math.sqrt(squares / K);
    if (nonFinite[k]! > 0 || Number.isNaN(sd)) {
      for (let c = 0; c < K; c++) tuning[base + c] = Number.NaN;
      preferred[k] = -1;
      selectivity[k] = Number.NaN;
      continue;
    }
    if (sd <= ZERO_VARIANCE_RELATIVE * largest) {
      zeroVariance[k] = 1;
      preferred[k] = -1;
    } else {
      for (let c = 0; c < K; c++) tuning[base + c] = (mean[base + c]! - centre) / sd;
      preferred[k] = best;
    }
    if (negative) {
      selectivity[k] = Number.NaN;
    } else {
      const rest = (sum - bestValue) / (K - 1);
      const total = bestValue + rest;
      selectivity[k] = total > 0 ? (bestValue - rest) / total : 0;
    }
  }
  return {
    channels: C,
    categories: [...categories],
    mean,
    sem,
    count,
    tuning,
    zeroVariance,
    preferred,
    selectivity,
    nonFinite,
    stimuliUsed,
    stimuliSkipped: N - stimuliUsed,
  };
}

/**
 * The tuning values t_kc of every channel for one category (a column of the table), e.g. to build a
 * gain pattern or fit a signature.
 *
 * @param table a result of `computeTuning`.
 * @param category one of `table.categories`.
 * @returns Float64Array [C], a copy.
 * @throws UsageError when the category is not in the table (with the closest names).
 */
export function tuningColumn(table: TuningTable, category: string): Float64Array {
  const K = table.categories.length;
  const c = table.categories.indexOf(category);
  if (c < 0) {
    const near = closestHint(category, table.categories);
    throw new UsageError('E_TUNING_CATEGORY', `category "${category}" is not in the tuning table (${K} categories)${near ? `; ${near}` : ''}`);
  }
  const column = new Float64Array(table.channels);
  for (let k = 0; k < table.channels; k++) column[k] = table.tuning[k * K + c]!;
  return column;
}

function collectCategories(
  stimulusLabels: readonly string[],
  categoryIndex: ReadonlyMap<string, number>,
  singleLabel: boolean,
  into: number[],
): void {
  into.length = 0;
  if (singleLabel && new Set(stimulusLabels).size !== 1) return;
  for (const label of stimulusLabels) {
    const c = categoryIndex.get(label);
    if (c !== undefined && !into.includes(c)) into.push(c);
  }
}

function checkShape(
  channelMeans: Float32Array | Float64Array,
  N: number,
  C: number,
  labels: readonly (readonly string[])[],
): void {
  if (!Number.isInteger(N) || N < 1 || !Number.isInteger(C) || C < 1) {
    throw new UsageError('E_TUNING_SHAPE', `tuning shape stimuli = ${N}, channels = ${C} must be positive integers`);
  }
  if (channelMeans.length !== N * C) {
    throw new UsageError(
      'E_TUNING_SHAPE',
      `tuning channel means have ${channelMeans.length} values but stimuli × channels = ${N} × ${C} = ${N * C}`,
      { hint: 'pass per-stimulus channel means laid out [N, C] row-major' },
    );
  }
  if (labels.length !== N) {
    throw new UsageError('E_TUNING_LABELS', `tuning has labels for ${labels.length} stimuli but ${N} stimuli`, {
      hint: 'pass one label list per stimulus (empty for unlabelled ones)',
    });
  }
}
