/**
 * How a modulated readout differs from its baseline beyond a fixed threshold: the hit rate at matched
 * false-alarm rate (threshold-free) and the criterion-shift-only control (what moving the criterion alone
 * would have done). Used by the diff's task read-out and by every sweep cell.
 */

import { criterionShiftControl, hitRateRangeAtFalseAlarm } from '../stats/roc.js';
import { detectionStats, type ScoreDetection } from '../stats/signal-detection.js';

/** The baseline side: its scores, signal flags, fixed threshold and the detection there. */
export interface BaselineReadout {
  scores: ArrayLike<number>;
  signal: Uint8Array;
  threshold: number;
  detection: ScoreDetection;
}

/** The result of `readoutChanges`. */
export interface ReadoutChanges {
  /**
   * Hit rate of the modulated ROC at the baseline's false-alarm rate F minus the baseline ROC's there, in pp,
   * each curve read at the middle of its stretch at F (`hitRateRangeAtFalseAlarm`: an empirical ROC can
   * rise vertically at F, so several hit rates belong to F).
   */
  matchedHitRatePp: number;
  /** The range of that difference over the two stretches, [mod low − base high, mod high − base low] in pp; it holds the fixed-threshold hit-rate change whenever the modulated false-alarm rate is F too. */
  matchedHitRateRangePp: [number, number];
  /** Baseline + constant shift reproducing the modulated false-alarm rate at the threshold: shift, and hit rate (pp) and d′ vs base. */
  criterionControl: { shift: number; hitRatePp: number; dPrime: number };
}

/**
 * Threshold-free and criterion-only read-outs of one modulated readout against its baseline.
 *
 * The matched hit rate compares both ROC curves at the baseline's false-alarm rate F, the same way on both
 * (the middle of each curve's stretch at F, so that a pure criterion move — a constant added to every
 * score — gives exactly 0), with the range over the stretches beside it. The control applies `criterionShiftControl` to the baseline scores with the modulated
 * false-alarm rate as target; its d′ comes from the same log-linear policy (`'auto'`) as the baseline's.
 *
 * @param base the baseline readout; @param modScores the modulated scores of the same trials.
 * @param modFalseAlarmRate the modulated false-alarm rate at the same threshold.
 * @returns matchedHitRatePp and criterionControl.
 * Edge cases: a non-finite threshold (rule `best` on separable scores) or a NaN rate gives a NaN control;
 * a class without finite scores gives NaN throughout.
 */
export function readoutChanges(base: BaselineReadout, modScores: ArrayLike<number>, modFalseAlarmRate: number): ReadoutChanges {
  const fa = base.detection.falseAlarmRate;
  const atMod = hitRateRangeAtFalseAlarm(modScores, base.signal, fa);
  const atBase = hitRateRangeAtFalseAlarm(base.scores, base.signal, fa);
  const matchedHitRatePp = 100 * ((atMod.low + atMod.high) / 2 - (atBase.low + atBase.high) / 2);
  const matchedHitRateRangePp: [number, number] = [100 * (atMod.low - atBase.high), 100 * (atMod.high - atBase.low)];
  const none = { shift: Number.NaN, hitRatePp: Number.NaN, dPrime: Number.NaN };
  if (!Number.isFinite(base.threshold) || !(modFalseAlarmRate >= 0 && modFalseAlarmRate <= 1)) return { matchedHitRatePp, matchedHitRateRangePp, criterionControl: none };
  const control = criterionShiftControl(base.scores, base.signal, base.threshold, modFalseAlarmRate);
  if (!Number.isFinite(control.hitRate)) return { matchedHitRatePp, matchedHitRateRangePp, criterionControl: none };
  const { signalTrials, noiseTrials } = base.detection.counts;
  const shifted = detectionStats({ hits: Math.round(control.hitRate * signalTrials), signalTrials, falseAlarms: Math.round(control.falseAlarmRate * noiseTrials), noiseTrials });
  return {
    matchedHitRatePp,
    matchedHitRateRangePp,
    criterionControl: { shift: control.shift, hitRatePp: 100 * (control.hitRate - base.detection.hitRate), dPrime: shifted.dPrime - base.detection.dPrime },
  };
}
