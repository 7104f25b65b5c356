/** What `diffSnapshots` takes and returns: options, per-layer rows, the detection read-out, the report and the two-scheme comparison. */
import type { DepthProfile } from '../analysis/depth-profile.js';
import type { SignatureFit } from '../analysis/signature.js';
import type { DetectionStats } from '../stats/signal-detection.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import type { ReadoutMap, ReadoutMapTag } from '../graph/category-map.js';
import type { TuningUnit } from './tune.js';

/** Per-channel tuning values of one layer for the target category (e.g. from a tuning table). */
export type TuningLookup = (layer: string) => Float64Array | undefined;

/** Options of `diffSnapshots`. */
export interface DiffOptions {
  /** Baseline snapshot (folder or opened). */
  base: string | Snapshot;
  /** Modulated snapshot. */
  mod: string | Snapshot;
  /** A second modulated snapshot to compare side by side with `mod`. */
  vs?: string | Snapshot;
  /** A pairing that should show no effect (e.g. a gain-1 re-run or a shuffled control): its metrics are the noise floor. */
  floor?: string | Snapshot;
  /** Tuning values per layer for `target`: enables the feature-similarity-gain signature. */
  tuning?: TuningLookup;
  /** Attended category (for the signature and as the default detection task). */
  target?: string;
  /** `detect:CATEGORY` (one readout unit) or `labels` (every category with a readout unit). */
  task?: string;
  /** Readout map (`--readout-map`): categories scored by the log-sum-exp of their readout units instead of the sidecar's one unit each. */
  readoutMap?: ReadoutMap;
  /** Bootstrap resamples over stimuli (default 1000; 0 disables). */
  bootstrap?: number;
  /** Seed of the bootstrap (default 0). */
  seed?: number;
  /** Channel ratio tolerance for "up"/"down" (default 0.01). */
  tolerance?: number;
  /** Decision threshold on readout scores: a number, `best` (accuracy-maximising on the baseline), or `auto` (the model's threshold if its sidecar gives one, else `best`). */
  threshold?: number | 'best' | 'auto';
  /** Detection measure the verdict leads with and `--vs` compares: `auc` (ROC area, threshold-free; default) or `dprime` (d′ at the fixed threshold). */
  measure?: 'auc' | 'dprime';
  /** Called as each layer finishes. */
  onLayer?: (done: number, total: number, name: string) => void;
}

/** One layer of the diff. */
export interface LayerDiffRow {
  name: string;
  op: string;
  depth: number;
  /** Position among the snapshot's recorded layers (0-based). */
  ordinal: number;
  /** Weight layers from the input to this layer (null in snapshots of older builds). */
  weightDepth: number | null;
  /** This layer is a modulation site. */
  site: boolean;
  /** After the (first) site in graph order, whether or not the site was recorded: the layers survival and the depth profile look at. */
  downstream: boolean;
  /** Depth below the (first) site in `DiffReport.depthUnit` (weight layers: 0 for the site and the layers before the next weight layer); ≤ 0 above it; NaN without a site. */
  belowSite: number;
  relativeChange: number;
  relativeChangeMedian: number;
  cosine: number;
  pearson: number;
  /** Some baseline channel mean is negative: no channel ratio (NaN); up/down count mean shifts beyond tolerance × the RMS channel mean (`LayerDiffMetrics.signed`). */
  signedLayer: boolean;
  channelRatioMean: number;
  channelRatioSd: number;
  fractionUp: number;
  fractionDown: number;
  effectSize: number;
  nonFinite: { base: number; mod: number };
  /** Noise floor of relativeChange for this layer. */
  floor: number;
  aboveFloor: boolean;
  /** Bootstrap interval of relativeChange over stimuli, when bootstrapping. */
  relativeChangeCi: [number, number] | null;
  /** Feature-similarity-gain signature at this layer (with a tuning table). */
  signature: (Omit<SignatureFit, 'normalisedRank' | 'ratio'>) | null;
  /** The values were identical files (upstream of the modulation, referenced from the baseline). */
  unchanged: boolean;
  /** What the channel means, ratios and up/down are of, from the layer's layout: `features` of a token tensor (over all tokens), `heads`, or `channels` (absent in reports of older builds: channels). */
  unit?: TuningUnit;
}

/** Detection read-out of one category. */
export interface TaskCategory {
  category: string;
  unit: number;
  threshold: number;
  signalTrials: number;
  noiseTrials: number;
  base: DetectionStats;
  mod: DetectionStats;
  /** mod − base, in percentage points for rates and accuracy, in units for d′ and c. */
  change: { hitRatePp: number; falseAlarmRatePp: number; accuracyPp: number; dPrime: number; criterion: number };
  /** Why d′ and c at this threshold are not shown (NaN), when the baseline answers the same for every display (`degenerateThreshold`); else null. */
  degenerate: string | null;
  /** Bootstrap intervals over stimuli of the changes (one set of resamples for all three). */
  ci: { dPrime: [number, number]; accuracyPp: [number, number]; auc: [number, number] } | null;
  /** ROC area of the readout (threshold-free), base and mod, their difference and its bootstrap interval. */
  auc: { base: number; mod: number; change: number; ci: [number, number] | null };
  /** Hit rate of the modulated ROC at the baseline's false-alarm rate minus the baseline ROC's there, in pp (each curve read at the middle of its vertical stretch there; see `readoutChanges`). */
  matchedHitRatePp: number;
  /** Range of that difference over the curves' vertical stretches at the baseline's false-alarm rate, in pp; holds the fixed-threshold ΔH whenever the false-alarm rate did not change. */
  matchedHitRateRangePp: [number, number];
  /** Baseline scores shifted by the constant that reproduces the modulated false-alarm rate: hit rate and d′ vs base. */
  criterionControl: { shift: number; hitRatePp: number; dPrime: number };
}

/** Task read-out: per category and averaged over categories. */
export interface TaskReport {
  kind: 'detect';
  readout: string;
  /** The readout map the categories' scores came from (log-sum-exp of their units), absent for the sidecar's units. */
  readoutMap?: ReadoutMapTag;
  thresholdRule: string;
  categories: TaskCategory[];
  base: DetectionStats;
  mod: DetectionStats;
  change: TaskCategory['change'];
  ci: TaskCategory['ci'];
  /** Means over categories (the interval is of the mean change). */
  auc: TaskCategory['auc'];
  matchedHitRatePp: number;
  matchedHitRateRangePp: [number, number];
  criterionControl: { hitRatePp: number; dPrime: number };
  /** The measure the verdict leads with. */
  measure: 'auc' | 'dprime';
}

/** The whole diff. */
export interface DiffReport {
  base: { folder: string; modulation: null };
  mod: { folder: string; modulation: unknown };
  sites: string[];
  stimuli: number;
  layers: LayerDiffRow[];
  floor: { source: 'snapshot' | 'dtype'; description: string };
  /** Deepest layer below the site whose relative change stays above the floor. */
  survival: { layer: string | null; belowSite: number | null };
  /** Unit of `belowSite`, survival and the depth profile's rate: weight layers (Conv, Gemm, MatMul with a weight), or recorded layers for snapshots of older builds. */
  depthUnit: 'weight layers' | 'recorded layers';
  depthProfile: DepthProfile;
  task: TaskReport | null;
  verdict: string;
}

/** The result of `diffSnapshots` with `vs`: both diffs and a per-layer comparison. */
export interface SchemeComparison {
  a: DiffReport;
  b: DiffReport;
  layers: Array<{ name: string; depth: number; a: number; b: number; larger: 'a' | 'b' | 'equal'; separated: boolean }>;
  /** Task change of A and B in `measure` (ROC area by default). */
  task: { a: number; b: number; larger: 'a' | 'b' | 'equal'; separated: boolean; measure: 'auc' | 'dprime' } | null;
  verdict: string;
}
