/**
 * How a modulated readout differs from its baseline beyond a fixed threshold: the hit rate at matched
 * false-alarm rate (threshold-free) and the criterion-shift-only control (what moving the criterion alone
 * would have done). Used by the diff's task read-out and by every sweep cell.
 */

import { criterionShiftControl, hitRateAtFalseAlarm } from './roc.js';
import { detectionStats, type ScoreDetection } from './signal-detection.js';

/** The baseline side: its scores, signal flags, fixed threshold and the detection there. */
export interface BaselineReadout {
  scores: ArrayLike<number>;
  signal: Uint8Array;
  threshold: number;
  detection: ScoreDetection;
}

/** The result of `readoutChanges`. */
export interface ReadoutChanges {
  /** Hit rate of the modulated ROC at the baseline's false-alarm rate minus the baseline ROC's there, in pp. */
  matchedHitRatePp: number;
  /** Baseline + constant shift reproducing the modulated false-alarm rate at the threshold: shift, and hit rate (pp) and d′ vs base. */
  criterionControl: { shift: number; hitRatePp: number; dPrime: number };
}

/**
 * Threshold-free and criterion-only read-outs of one modulated readout against its baseline.
 *
 * The matched hit rate compares both ROC curves at the baseline's false-alarm rate (the baseline's own ROC,
 * not its fixed-threshold hit rate, so that a pure criterion move — a constant added to every score —
 * gives exactly 0). The control applies `criterionShiftControl` to the baseline scores with the modulated
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
  const matchedHitRatePp = 100 * (hitRateAtFalseAlarm(modScores, base.signal, fa) - hitRateAtFalseAlarm(base.scores, base.signal, fa));
  const none = { shift: Number.NaN, hitRatePp: Number.NaN, dPrime: Number.NaN };
  if (!Number.isFinite(base.threshold) || !(modFalseAlarmRate >= 0 && modFalseAlarmRate <= 1)) return { matchedHitRatePp, criterionControl: none };
  const control = criterionShiftControl(base.scores, base.signal, base.threshold, modFalseAlarmRate);
  if (!Number.isFinite(control.hitRate)) return { matchedHitRatePp, criterionControl: none };
  const { signalTrials, noiseTrials } = base.detection.counts;
  const shifted = detectionStats({ hits: Math.round(control.hitRate * signalTrials), signalTrials, falseAlarms: Math.round(control.falseAlarmRate * noiseTrials), noiseTrials });
  return {
    matchedHitRatePp,
    criterionControl: { shift: control.shift, hitRatePp: 100 * (control.hitRate - base.detection.hitRate), dPrime: shifted.dPrime - base.detection.dPrime },
  };
}
