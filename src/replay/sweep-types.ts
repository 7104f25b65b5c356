/**
 * The result contract of `sonde sweep` (`sweep.json`, also returned by `sweepModulations`). The HTML
 * report and scripts rely on these field names.
 */

import type { SweepEvaluation } from './held-out.js';
import type { SweepTableDetection } from '../snapshot/sweep-table.js';
import type { ReadoutMapTag } from '../graph/category-map.js';

/** Schemes a sweep knows. */
export const SWEEP_SCHEMES = ['tuning', 'sensitivity', 'uniform', 'shuffled'] as const;
export type SweepScheme = (typeof SWEEP_SCHEMES)[number];

/** A `--match` target: the change in one measure that calibration looks for. */
export interface MatchTarget {
  measure: 'auc' | 'dPrime' | 'accuracyPp';
  value: number;
}

/**
 * Detection read-out of one condition (baseline or modulated): hit and false-alarm rates, d′, criterion,
 * accuracy, and the ROC area of the readout score (threshold-free; see stats/roc.ts). The sweep table
 * stores exactly these fields (src/snapshot/sweep-table.ts).
 */
export type SweepDetection = SweepTableDetection;

/** Which detection measure a verdict (`best`, `control`, the summary) ranks by. */
export type SweepMeasure = 'auc' | 'dprime';

/** Per-layer effect of one cell, below and at the site (`--depth-profile`). */
export interface SweepDepthPoint {
  layer: string;
  /** Depth among recordable tensors. */
  depth: number;
  /** Weight layers between the site and this layer (0 = the site and the layers before the next weight layer; `weightLayerDepths`). */
  belowSite: number;
  relativeChange: number;
  /** Slope of the feature-similarity-gain signature at this layer (NaN when no tuning is known there). */
  signatureSlope: number;
}

/** One sweep cell: a site × scheme × strength × cued category (× control seed). */
export interface SweepCell {
  site: string;
  /** `tuning`, `sensitivity`, `uniform`, `shuffled`. */
  scheme: string;
  strength: number;
  /** Cued category (the attended one, and the detection task). */
  category: string;
  /** Seed of the shuffled control (0 for other schemes). */
  seed: number;
  base: SweepDetection;
  mod: SweepDetection;
  /** mod − base: d′ and criterion in units, rates and accuracy in percentage points. */
  change: {
    dPrime: number;
    criterion: number;
    hitRatePp: number;
    falseAlarmRatePp: number;
    accuracyPp: number;
    /** ROC area, mod − base. */
    auc: number;
    /** Hit rate of the modulated ROC at the baseline's false-alarm rate minus the baseline ROC's there, in pp. */
    matchedHitRatePp: number;
    /** 95 % percentile bootstrap interval over stimuli of `auc` (null in cells of older sweeps). */
    aucCi?: [number, number] | null;
    /** The same for `dPrime`. */
    dPrimeCi?: [number, number] | null;
    /** The change in each of the sweep's shared resamples (sweep-intervals.ts), for intervals of means over categories. */
    aucDraws?: number[];
    dPrimeDraws?: number[];
  };
  /**
   * Criterion-shift-only control: the baseline scores plus the constant shift that reproduces the modulated
   * false-alarm rate at the fixed threshold; its hit rate and d′ as changes vs base (pp, units).
   */
  criterionControl: { shift: number; hitRatePp: number; dPrime: number };
  /** Mean absolute relative change of channel activity at the site: mean_k |ḡ_k − 1| weighted as applied (see docs). */
  siteActivityChange: number;
  /** Present with `--depth-profile`. */
  depthProfile?: SweepDepthPoint[];
}

/** The best cell of a site (largest mean change across categories in `SweepResult.measure`). */
export interface SweepBest {
  site: string;
  scheme: string;
  strength: number;
  /** Mean over cued categories (and control seeds). */
  dPrimeChange: number;
  /** ROC-area change, mean over cued categories (and control seeds). */
  aucChange: number;
  accuracyPp: number;
  siteActivityChange: number;
  /** 95 % bootstrap interval over stimuli of the mean change in the ranking measure (null in sweeps of older builds). */
  ci?: [number, number] | null;
}

/** Calibration of one site and scheme against a target (`--match`). */
export interface SweepCalibration {
  site: string;
  scheme: string;
  /** The target as given, e.g. `auc:+0.05`, `dprime:+0.5` or `accuracy:+10pp`. */
  target: string;
  /** Smallest strength reaching the target (interpolated), or null when no swept strength reaches it. */
  strength: number | null;
  /** Activity modulation at the site implied by that strength (fraction, e.g. 0.08 = 8 %). */
  siteActivityChange: number | null;
  /** Whether that modulation lies inside the rule-of-thumb band for attention-related rate changes. */
  withinBand: boolean | null;
}

/** The whole sweep result. */
export interface SweepResult {
  kind: 'sweep';
  model: { file: string; sha256: string };
  baseline: string;
  sites: string[];
  schemes: string[];
  strengths: number[];
  categories: string[];
  /** Seeds of the shuffled control. */
  controlSeeds: number[];
  cells: SweepCell[];
  /** The measure `best`, `control` and the summary rank by (default `auc`, threshold-free). */
  measure: SweepMeasure;
  best: SweepBest[];
  calibration: SweepCalibration[];
  /** Rule-of-thumb band of attention-related firing-rate changes used for calibration, as fractions. */
  band: { low: number; high: number; source: string };
  /** Statistical comparison of the tuning scheme with the shuffled control across categories. */
  control: { meanTuning: number; meanShuffled: number; difference: number; pValue: number; test: string; measure: SweepMeasure } | null;
  /** What could make the figures mislead: unbalanced cued categories, a control test that cannot reach significance. Also in `summary`. */
  warnings?: string[];
  summary: string;
  /** Which snapshot the tables' gains came from and which detection was measured on; `heldOut` says whether they differ (see held-out.ts). */
  evaluation?: SweepEvaluation;
  /** The readout map the categories were scored under (log-sum-exp of their units; also in cells.arrow's metadata `sonde.readout_map`), absent for the sidecar's units. */
  readoutMap?: ReadoutMapTag;
  /** What the cells were computed from and its digest (a rerun into the same --out must match it; see sweep-inputs.ts). */
  inputs?: { digest: string; sonde: string; cellFormat: number; model: string; baseline: string; tuning: string | null; sensitivity: string | null; task: string; threshold: number | 'best' | 'auto'; depthProfileStimuli: number | null };
}
