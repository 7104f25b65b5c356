/**
 * Signal detection theory for yes/no detection readouts: hit and false-alarm rates, sensitivity d′,
 * criterion c and accuracy, plus turning continuous readout scores into yes/no decisions.
 * Definitions follow Macmillan & Creelman, "Detection Theory: A User's Guide" (2nd ed., 2005):
 * d′ = z(H) − z(F), c = −(z(H) + z(F)) / 2, with z the standard normal quantile.
 */

import { UsageError } from '../errors.js';
import { normalQuantile } from './normal.js';

/** Raw outcome counts of a yes/no detection experiment. */
export interface DetectionCounts {
  /** "Yes" responses on signal trials (0 ≤ hits ≤ signalTrials). */
  hits: number;
  /** Number of trials with the signal present (≥ 1). */
  signalTrials: number;
  /** "Yes" responses on noise trials (0 ≤ falseAlarms ≤ noiseTrials). */
  falseAlarms: number;
  /** Number of trials with the signal absent (≥ 1). */
  noiseTrials: number;
}

/**
 * When to apply the log-linear correction (Hautus 1995, Behavior Research Methods, Instruments &
 * Computers 27:46) H = (hits + 0.5) / (signalTrials + 1), F = (falseAlarms + 0.5) / (noiseTrials + 1):
 * `'auto'` only when a raw rate is 0 or 1 (then to both rates), `'always'` to every table,
 * `'none'` never (d′ may then be ±Infinity or NaN).
 */
export type RateCorrection = 'auto' | 'always' | 'none';

/** Options of `detectionStats`. */
export interface DetectionOptions {
  /** Log-linear correction policy; default `'auto'`. */
  correction?: RateCorrection;
}

/** Sensitivity and bias of one detection table. */
export interface DetectionStats {
  /** Raw hit rate hits / signalTrials. */
  hitRate: number;
  /** Raw false-alarm rate falseAlarms / noiseTrials. */
  falseAlarmRate: number;
  /** The hit rate that entered z(): the raw one, or the log-linear corrected one when `corrected`. */
  adjustedHitRate: number;
  /** The false-alarm rate that entered z(), likewise. */
  adjustedFalseAlarmRate: number;
  /** d′ = z(H) − z(F) from the adjusted rates. */
  dPrime: number;
  /** c = −(z(H) + z(F)) / 2 from the adjusted rates; positive = conservative (fewer "yes"). */
  criterion: number;
  /** (hits + correct rejections) / all trials, always from the raw counts. */
  accuracy: number;
  /** Whether the log-linear correction was applied. */
  corrected: boolean;
}

/**
 * d′, criterion and accuracy of one yes/no table.
 *
 * @param counts raw counts; all must be non-negative integers, hits ≤ signalTrials, falseAlarms ≤ noiseTrials.
 * @param options `correction`: `'auto'` (default) applies the log-linear correction to both rates only when
 *   either raw rate is exactly 0 or 1; `'always'` applies it to every table; `'none'` never.
 * @returns raw and adjusted rates, d′, c, accuracy (raw counts) and whether the correction was applied.
 * @throws UsageError when a count is negative, not an integer, larger than its trial count, or a trial count is 0.
 * Edge cases: with `'none'` a rate of 0 or 1 gives z = ∓Infinity, so d′ and c may be ±Infinity or NaN
 * (e.g. H = F = 1 gives ∞ − ∞ = NaN); that is reported as is, never clamped.
 */
export function detectionStats(counts: DetectionCounts, options: DetectionOptions = {}): DetectionStats {
  const { hits, signalTrials, falseAlarms, noiseTrials } = counts;
  checkCount('signalTrials', signalTrials);
  checkCount('noiseTrials', noiseTrials);
  checkCount('hits', hits);
  checkCount('falseAlarms', falseAlarms);
  if (signalTrials === 0) {
    throw new UsageError('E_DETECTION_COUNTS', 'detection table has signalTrials = 0: the hit rate is undefined', {
      hint: 'include at least one stimulus that contains the target',
    });
  }
  if (noiseTrials === 0) {
    throw new UsageError('E_DETECTION_COUNTS', 'detection table has noiseTrials = 0: the false-alarm rate is undefined', {
      hint: 'include at least one stimulus without the target',
    });
  }
  if (hits > signalTrials) {
    throw new UsageError('E_DETECTION_COUNTS', `detection table has hits = ${hits} > signalTrials = ${signalTrials}`);
  }
  if (falseAlarms > noiseTrials) {
    throw new UsageError('E_DETECTION_COUNTS', `detection table has falseAlarms = ${falseAlarms} > noiseTrials = ${noiseTrials}`);
  }
  const correction = options.correction ?? 'auto';
  if (correction !== 'auto' && correction !== 'always' && correction !== 'none') {
    throw new UsageError('E_DETECTION_OPTION', `correction "${String(correction)}" is not one of auto, always, none`);
  }
  const hitRate = hits / signalTrials;
  const falseAlarmRate = falseAlarms / noiseTrials;
  const extreme = hits === 0 || hits === signalTrials || falseAlarms === 0 || falseAlarms === noiseTrials;
  const corrected = correction === 'always' || (correction === 'auto' && extreme);
  const adjustedHitRate = corrected ? (hits + 0.5) / (signalTrials + 1) : hitRate;
  const adjustedFalseAlarmRate = corrected ? (falseAlarms + 0.5) / (noiseTrials + 1) : falseAlarmRate;
  const zH = normalQuantile(adjustedHitRate);
  const zF = normalQuantile(adjustedFalseAlarmRate);
  return {
    hitRate,
    falseAlarmRate,
    adjustedHitRate,
    adjustedFalseAlarmRate,
    dPrime: zH - zF,
    criterion: -(zH + zF) / 2,
    accuracy: (hits + (noiseTrials - falseAlarms)) / (signalTrials + noiseTrials),
    corrected,
  };
}

function checkCount(name: string, value: number): void {
  if (!Number.isInteger(value) || value < 0) {
    throw new UsageError('E_DETECTION_COUNTS', `detection count ${name} = ${String(value)} is not a non-negative integer`);
  }
}

/** Detection statistics from scores, with the counts they came from. */
export interface ScoreDetection extends DetectionStats {
  /** The table the scores gave (non-finite scores are not in it). */
  counts: DetectionCounts;
  /** Scores that were NaN or ±Infinity: counted here and left out of the table. */
  nonFiniteScores: number;
}

/**
 * Yes/no decisions from continuous readout scores: "yes" when score > threshold; then `detectionStats`.
 *
 * @param scores one readout score per trial.
 * @param isSignal 1 where the trial contains the signal, 0 where not (any non-zero counts as 1).
 * @param threshold decision threshold; may be ±Infinity (all "yes" / all "no"), not NaN.
 * @param options passed to `detectionStats`.
 * @returns the statistics, the counts, and how many scores were non-finite.
 * @throws UsageError when lengths differ, the threshold is NaN, or a class has no finite-scored trial.
 * Edge cases: NaN and ±Infinity scores are counted in `nonFiniteScores` and left out of the counts
 * (a non-finite readout is a broken run, not a decision); callers should report a non-zero count.
 */
export function detectFromScores(
  scores: Float32Array | Float64Array,
  isSignal: Uint8Array,
  threshold: number,
  options: DetectionOptions = {},
): ScoreDetection {
  checkScores(scores, isSignal);
  if (Number.isNaN(threshold)) {
    throw new UsageError('E_DETECTION_THRESHOLD', 'detection threshold is NaN', { hint: 'pass a number, or ±Infinity' });
  }
  let hits = 0;
  let signalTrials = 0;
  let falseAlarms = 0;
  let noiseTrials = 0;
  let nonFiniteScores = 0;
  for (let i = 0; i < scores.length; i++) {
    const score = scores[i]!;
    if (!Number.isFinite(score)) {
      nonFiniteScores++;
      continue;
    }
    const yes = score > threshold ? 1 : 0;
    if (isSignal[i] !== 0) {
      signalTrials++;
      hits += yes;
    } else {
      noiseTrials++;
      falseAlarms += yes;
    }
  }
  const counts = { hits, signalTrials, falseAlarms, noiseTrials };
  return { ...detectionStats(counts, options), counts, nonFiniteScores };
}

/** The result of `accuracyMaximisingThreshold`. */
export interface ThresholdChoice {
  /** The chosen threshold ("yes" when score > threshold). */
  threshold: number;
  /** Accuracy of that threshold on the finite scores. */
  accuracy: number;
  /** Scores that were NaN or ±Infinity, counted and left out. */
  nonFiniteScores: number;
}

/**
 * The decision threshold that maximises accuracy on these scores (rule "yes" when score > threshold).
 *
 * Candidates are −Infinity (all "yes"), the midpoint between each pair of adjacent distinct sorted scores,
 * and +Infinity (all "no"); every threshold in the open gap between two adjacent scores makes the same
 * decisions, and the midpoint represents the gap. Ties in accuracy go to the candidate closest to 0
 * (so a logit readout keeps its natural threshold when that is as good as any), and among those at
 * equal distance to the lower one. Where two adjacent scores are neighbouring doubles the midpoint
 * rounds to the lower score, which still separates them under the strict ">" rule.
 *
 * @param scores one readout score per trial.
 * @param isSignal 1 where the trial contains the signal, 0 where not.
 * @returns the threshold, its accuracy, and the count of non-finite scores left out.
 * @throws UsageError when lengths differ or no score is finite.
 * Edge cases: all scores equal → the better of −Infinity and +Infinity (−Infinity on a tie);
 * NaN and ±Infinity scores are counted and excluded, as in `detectFromScores`.
 */
export function accuracyMaximisingThreshold(scores: Float32Array | Float64Array, isSignal: Uint8Array): ThresholdChoice {
  checkScores(scores, isSignal);
  const finite: number[] = [];
  let nonFiniteScores = 0;
  for (let i = 0; i < scores.length; i++) {
    if (Number.isFinite(scores[i]!)) finite.push(i);
    else nonFiniteScores++;
  }
  const n = finite.length;
  if (n === 0) {
    throw new UsageError('E_DETECTION_SCORES', `none of the ${scores.length} detection scores is finite`, {
      hint: 'check the readout for NaN/Inf',
    });
  }
  const order = Int32Array.from(finite);
  order.sort((a, b) => scores[a]! - scores[b]!);
  let signals = 0;
  for (let i = 0; i < n; i++) if (isSignal[order[i]!] !== 0) signals++;

  // Threshold −Infinity: every trial "yes", so the correct ones are the signal trials.
  let correct = signals;
  let bestCorrect = correct;
  let bestThreshold = Number.NEGATIVE_INFINITY;
  let i = 0;
  while (i < n) {
    // Move the threshold past the group of scores equal to scores[order[i]]: they all become "no".
    const value = scores[order[i]!]!;
    while (i < n && scores[order[i]!]! === value) {
      correct += isSignal[order[i]!] !== 0 ? -1 : 1;
      i++;
    }
    let candidate: number;
    if (i < n) {
      const next = scores[order[i]!]!;
      candidate = value + (next - value) / 2;
      if (candidate >= next) candidate = value;
    } else {
      candidate = Number.POSITIVE_INFINITY;
    }
    if (correct > bestCorrect || (correct === bestCorrect && Math.abs(candidate) < Math.abs(bestThreshold))) {
      bestCorrect = correct;
      bestThreshold = candidate;
    }
  }
  return { threshold: bestThreshold, accuracy: bestCorrect / n, nonFiniteScores };
}

function checkScores(scores: Float32Array | Float64Array, isSignal: Uint8Array): void {
  if (scores.length !== isSignal.length) {
    throw new UsageError(
      'E_DETECTION_SCORES',
      `detection scores have ${scores.length} entries but isSignal has ${isSignal.length}`,
      { hint: 'pass one signal flag per score' },
    );
  }
}
