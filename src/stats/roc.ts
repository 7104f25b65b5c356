/**
 * Threshold-free detection measures of a continuous readout: the area under the empirical ROC curve,
 * the hit rate at a given false-alarm rate, and the criterion-shift-only control (how far the hit rate
 * moves when only the decision criterion moves).
 *
 * The empirical ROC joins the points (F, H) of the rule "yes when score > t" for every cut t between
 * distinct scores, with straight lines (what a randomised choice between adjacent cuts achieves).
 * Its area equals the Mann–Whitney statistic P(S > N) + ½·P(S = N) over all signal/noise pairs
 * (Bamber 1975, J. Math. Psychol. 12:387; Hanley & McNeil 1982, Radiology 143:29), computed here from
 * mid-ranks in O(n log n).
 *
 * Non-finite scores (NaN, ±Infinity) are a broken readout, not a decision: every function here leaves
 * them out, as `detectFromScores` does; callers that care count them there.
 */

import { UsageError } from '../errors.js';

/**
 * Area under the empirical ROC curve of scores for signal against noise trials.
 *
 * @param scores one readout score per trial (higher = more "signal").
 * @param isSignal 1 where the trial contains the signal, 0 where not (any non-zero counts as 1).
 * @returns AUC in [0, 1]: 1 when every signal score is above every noise score, 0.5 for no separation.
 * @throws UsageError when the lengths differ.
 * Edge cases: tied scores count ½ per signal/noise pair (mid-ranks); non-finite scores are left out;
 * NaN when no finite signal or no finite noise score remains.
 */
export function rocAuc(scores: ArrayLike<number>, isSignal: Uint8Array): number {
  checkLengths(scores, isSignal);
  return rocAucWeighted(scores, isSignal, new Uint8Array(scores.length).fill(1), finiteOrder(scores));
}

/**
 * ROC area of a weighted sample: trial i counts `weights[i]` times (a bootstrap resample given as
 * multiplicities), from one sort of the full data shared by every resample — O(n) per call.
 *
 * @param scores, isSignal as in `rocAuc`; @param weights non-negative multiplicity per trial (0 = left out).
 * @param order `rocOrder(scores)`, computed once for all resamples.
 * @returns the same value `rocAuc` gives on the sample with each trial repeated weights[i] times.
 * Edge cases: as `rocAuc` (NaN when a class has zero total weight).
 */
export function rocAucWeighted(scores: ArrayLike<number>, isSignal: Uint8Array, weights: ArrayLike<number>, order: Int32Array): number {
  const n = order.length;
  let noiseBelow = 0;
  let signalCount = 0;
  let wins = 0;
  let i = 0;
  // Walk the scores upwards in groups of equal value; each signal score in a group beats every noise
  // score below the group and ties with the noise scores inside it.
  while (i < n) {
    const value = scores[order[i]!]!;
    let signalInGroup = 0;
    let noiseInGroup = 0;
    while (i < n && scores[order[i]!]! === value) {
      const w = weights[order[i]!]!;
      if (isSignal[order[i]!] !== 0) signalInGroup += w;
      else noiseInGroup += w;
      i++;
    }
    wins += signalInGroup * (noiseBelow + noiseInGroup / 2);
    noiseBelow += noiseInGroup;
    signalCount += signalInGroup;
  }
  if (signalCount === 0 || noiseBelow === 0) return Number.NaN;
  return wins / (signalCount * noiseBelow);
}

/** Indices of the finite scores in ascending score order, for `rocAucWeighted`. */
export function rocOrder(scores: ArrayLike<number>): Int32Array {
  return finiteOrder(scores);
}

/**
 * Standard error of an AUC by the exponential approximation of Hanley & McNeil (1982, Radiology 143:29,
 * eq. 1–3): SE² = [A(1−A) + (nS−1)(Q1−A²) + (nN−1)(Q2−A²)] / (nS·nN), Q1 = A/(2−A), Q2 = 2A²/(1+A).
 *
 * @param auc the area A in [0, 1].
 * @param signalTrials nS ≥ 1; @param noiseTrials nN ≥ 1.
 * @returns the approximate standard error.
 * @throws UsageError when auc is outside [0, 1] or a trial count is not a positive integer.
 * Edge cases: a NaN auc gives NaN (the area could not be measured).
 */
export function aucStandardError(auc: number, signalTrials: number, noiseTrials: number): number {
  if (Number.isNaN(auc)) return Number.NaN;
  if (!(auc >= 0 && auc <= 1)) {
    throw new UsageError('E_ROC_AUC', `ROC area ${String(auc)} is outside [0, 1]`);
  }
  for (const [name, value] of [['signalTrials', signalTrials], ['noiseTrials', noiseTrials]] as const) {
    if (!Number.isInteger(value) || value < 1) {
      throw new UsageError('E_ROC_COUNTS', `${name} = ${String(value)} is not a positive integer`);
    }
  }
  const q1 = auc / (2 - auc);
  const q2 = (2 * auc * auc) / (1 + auc);
  const a2 = auc * auc;
  const variance = (auc * (1 - auc) + (signalTrials - 1) * (q1 - a2) + (noiseTrials - 1) * (q2 - a2)) / (signalTrials * noiseTrials);
  return Math.sqrt(Math.max(0, variance));
}

/**
 * Hit rate of the empirical ROC at a given false-alarm rate, by linear interpolation between its points.
 *
 * @param scores one readout score per trial; @param isSignal 1 = signal trial, 0 = noise trial.
 * @param falseAlarmRate the false-alarm rate F in [0, 1] at which to read the curve.
 * @returns H(F) in [0, 1]: the largest hit rate any (randomised) cut reaches with false-alarm rate ≤ F.
 * @throws UsageError when the lengths differ or F is not in [0, 1].
 * Edge cases: where the curve rises vertically at F (signal-only scores between two noise scores) the
 * upper end is returned; non-finite scores are left out; NaN when a class has no finite score.
 * A constant added to every score, or any strictly increasing transform, leaves the result unchanged.
 */
export function hitRateAtFalseAlarm(scores: ArrayLike<number>, isSignal: Uint8Array, falseAlarmRate: number): number {
  return hitRateRangeAtFalseAlarm(scores, isSignal, falseAlarmRate).high;
}

/** Where an empirical ROC crosses a false-alarm rate: a single hit rate, or a vertical stretch. */
export interface HitRateRange {
  /** Lowest hit rate of the curve at F (the strictest cut reaching F). */
  low: number;
  /** Highest hit rate of the curve at F (what `hitRateAtFalseAlarm` returns). */
  high: number;
}

/**
 * The hit rates of the empirical ROC at a false-alarm rate F. Where F falls inside a sloped segment the
 * curve is read by linear interpolation (low = high); where F is one of the curve's own false-alarm rates,
 * the curve may rise vertically there (signal scores between two noise scores) and every hit rate of
 * that stretch belongs to F: low is its bottom, high its top. A fixed-threshold operating point with
 * false-alarm rate F always lies in [low, high].
 * @param scores one readout score per trial; @param isSignal 1 = signal trial, 0 = noise trial.
 * @param falseAlarmRate F in [0, 1].
 * @returns { low, high }, both NaN when a class has no finite score.
 * @throws UsageError when the lengths differ or F is not in [0, 1].
 * Edge cases: non-finite scores are left out; F = 0 starts at the origin (low 0).
 */
export function hitRateRangeAtFalseAlarm(scores: ArrayLike<number>, isSignal: Uint8Array, falseAlarmRate: number): HitRateRange {
  checkLengths(scores, isSignal);
  checkRate('falseAlarmRate', falseAlarmRate);
  const order = finiteOrder(scores);
  const n = order.length;
  let signalCount = 0;
  for (let k = 0; k < n; k++) if (isSignal[order[k]!] !== 0) signalCount++;
  const noiseCount = n - signalCount;
  if (signalCount === 0 || noiseCount === 0) return { low: Number.NaN, high: Number.NaN };
  let hits = 0;
  let falseAlarms = 0;
  let low = falseAlarmRate === 0 ? 0 : Number.NaN; // bottom of the stretch at F, once the curve reaches F
  let i = n - 1;
  while (i >= 0) {
    const value = scores[order[i]!]!;
    const h0 = hits / signalCount;
    const f0 = falseAlarms / noiseCount;
    while (i >= 0 && scores[order[i]!]! === value) {
      if (isSignal[order[i]!] !== 0) hits++;
      else falseAlarms++;
      i--;
    }
    const h1 = hits / signalCount;
    const f1 = falseAlarms / noiseCount;
    if (f1 > falseAlarmRate) {
      if (f0 === falseAlarmRate) return { low: Number.isNaN(low) ? h0 : low, high: h0 };
      const h = h0 + ((h1 - h0) * (falseAlarmRate - f0)) / (f1 - f0);
      return { low: h, high: h };
    }
    if (f1 === falseAlarmRate && Number.isNaN(low)) low = h1;
  }
  return { low: Number.isNaN(low) ? 1 : low, high: 1 };
}

/** The result of `criterionShiftControl`. */
export interface CriterionShift {
  /** The constant s added to every baseline score. */
  shift: number;
  /** Hit rate of "yes when base + s > threshold". */
  hitRate: number;
  /** False-alarm rate of that rule: the achievable one nearest the target. */
  falseAlarmRate: number;
}

/**
 * The criterion-shift-only control: the smallest constant shift s of the baseline scores after which the
 * fixed threshold gives (as nearly as the data allow) the target false-alarm rate, and the hit rate it then
 * gives. A modulation whose hit rate is no better than this control at its own false-alarm rate did
 * nothing but move the criterion.
 *
 * The rule "base + s > threshold" is the rule "base > cut" with cut = threshold − s. The number of noise
 * scores above the cut is the achievable count nearest target·nN (ties between two counts go to the
 * smaller one). Every cut in [b, a) gives that count, b the largest noise score left below and a the
 * smallest noise score above; the cut is the one nearest the threshold: the threshold itself when it is
 * in [b, a) (shift 0, the baseline table), b when the threshold is below b, and midway between a and the
 * next lower score of either class when the threshold is at or above a (one score unit below a when no
 * score is lower). So the shift crosses no score it does not have to.
 *
 * @param baseScores baseline readout scores; @param isSignal 1 = signal trial, 0 = noise trial.
 * @param threshold the fixed decision threshold (finite).
 * @param targetFalseAlarmRate the false-alarm rate to reproduce, in [0, 1].
 * @returns shift, and the hit and false-alarm rates of the shifted scores (computed as base > cut, exact).
 * @throws UsageError when lengths differ, the threshold is not finite, or the target is not in [0, 1].
 * Edge cases: non-finite scores are left out; with no finite noise or signal score every field is NaN.
 */
export function criterionShiftControl(
  baseScores: ArrayLike<number>,
  isSignal: Uint8Array,
  threshold: number,
  targetFalseAlarmRate: number,
): CriterionShift {
  checkLengths(baseScores, isSignal);
  checkRate('targetFalseAlarmRate', targetFalseAlarmRate);
  if (!Number.isFinite(threshold)) {
    throw new UsageError('E_ROC_THRESHOLD', `criterion-shift threshold ${String(threshold)} is not finite`, {
      hint: 'pass the readout threshold the detection used',
    });
  }
  let noiseCount = 0;
  let signalCount = 0;
  for (let i = 0; i < baseScores.length; i++) {
    if (!Number.isFinite(baseScores[i]!)) continue;
    if (isSignal[i] !== 0) signalCount++;
    else noiseCount++;
  }
  if (noiseCount === 0 || signalCount === 0) return { shift: Number.NaN, hitRate: Number.NaN, falseAlarmRate: Number.NaN };
  const noise = new Float64Array(noiseCount);
  for (let i = 0, k = 0; i < baseScores.length; i++) {
    if (Number.isFinite(baseScores[i]!) && isSignal[i] === 0) noise[k++] = baseScores[i]!;
  }
  noise.sort(); // ascending; noise[noiseCount − j] is the j-th largest
  // Achievable counts of noise above a cut: j = 0, nN, and every j whose j-th and (j+1)-th largest differ.
  const target = targetFalseAlarmRate * noiseCount;
  let count = 0;
  let bestDistance = target;
  for (let j = 1; j <= noiseCount; j++) {
    const achievable = j === noiseCount || noise[noiseCount - j]! > noise[noiseCount - j - 1]!;
    if (!achievable) continue;
    const distance = Math.abs(j - target);
    if (distance < bestDistance) {
      bestDistance = distance;
      count = j;
    }
  }
  const above = count === 0 ? Number.POSITIVE_INFINITY : noise[noiseCount - count]!;
  const below = count === noiseCount ? Number.NEGATIVE_INFINITY : noise[noiseCount - count - 1]!;
  let cut: number;
  if (threshold >= below && threshold < above) cut = threshold;
  else if (threshold < below) cut = below;
  else {
    // just below `above`: midway to the largest score of either class under it
    let lower = Number.NEGATIVE_INFINITY;
    for (let i = 0; i < baseScores.length; i++) {
      const score = baseScores[i]!;
      if (Number.isFinite(score) && score < above && score > lower) lower = score;
    }
    cut = lower === Number.NEGATIVE_INFINITY ? above - 1 : lower + (above - lower) / 2;
    if (cut >= above) cut = lower; // neighbouring doubles: the midpoint rounds up; the lower one still separates
  }
  let hits = 0;
  let falseAlarms = 0;
  for (let i = 0; i < baseScores.length; i++) {
    const score = baseScores[i]!;
    if (!Number.isFinite(score) || !(score > cut)) continue;
    if (isSignal[i] !== 0) hits++;
    else falseAlarms++;
  }
  return { shift: threshold - cut, hitRate: hits / signalCount, falseAlarmRate: falseAlarms / noiseCount };
}

/** Indices of the finite scores, sorted by ascending score. */
function finiteOrder(scores: ArrayLike<number>): Int32Array {
  let count = 0;
  for (let i = 0; i < scores.length; i++) if (Number.isFinite(scores[i]!)) count++;
  const order = new Int32Array(count);
  for (let i = 0, k = 0; i < scores.length; i++) if (Number.isFinite(scores[i]!)) order[k++] = i;
  order.sort((a, b) => scores[a]! - scores[b]!);
  return order;
}

function checkLengths(scores: ArrayLike<number>, isSignal: Uint8Array): void {
  if (scores.length !== isSignal.length) {
    throw new UsageError('E_ROC_SCORES', `ROC scores have ${scores.length} entries but isSignal has ${isSignal.length}`, {
      hint: 'pass one signal flag per score',
    });
  }
}

function checkRate(name: string, rate: number): void {
  if (!(rate >= 0 && rate <= 1)) {
    throw new UsageError('E_ROC_RATE', `${name} = ${String(rate)} is not a rate in [0, 1]`);
  }
}
