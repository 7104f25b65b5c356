/**
 * The analysis core: pure numeric functions over typed arrays and plain objects (no files, no process,
 * no Arrow). Statistics, signal detection, tuning, layer diffs, signatures and depth profiles.
 */

export { normalCdf, normalQuantile } from '../stats/normal.js';
export {
  accuracyMaximisingThreshold,
  detectFromScores,
  detectionStats,
  type DetectionCounts,
  type DetectionOptions,
  type DetectionStats,
  type RateCorrection,
  type ScoreDetection,
  type ThresholdChoice,
} from '../stats/signal-detection.js';
export { describe, mean, median, quantile, quantileSorted, standardDeviation, variance, type Description } from '../stats/describe.js';
export { averageRanks, linearFit, pearson, spearman, type LinearFit } from '../stats/correlation.js';
export { bootstrapInterval, bootstrapIntervals, type BootstrapInterval, type BootstrapOptions } from '../stats/bootstrap.js';
export { computeTuning, tuningColumn, type TuningInput, type TuningTable } from './tuning.js';
export {
  LayerDiffAccumulator,
  type ChannelMeans,
  type LayerDiffOptions,
} from './layer-diff.js';
export type { LayerDiffMetrics } from './layer-diff-metrics.js';
export { fitSignature, type SignatureFit, type SignatureInput } from './signature.js';
export { fitDepthProfile, type DepthPoint, type DepthProfile, type DepthProfileOptions } from './depth-profile.js';
export { sparkline, type SparklineOptions } from './sparkline.js';
export { signFlipTest, type SignFlipResult } from '../stats/sign-flip.js';
export { aucStandardError, criterionShiftControl, hitRateAtFalseAlarm, rocAuc, rocAucWeighted, rocOrder, type CriterionShift } from '../stats/roc.js';
export { readoutChanges, type BaselineReadout, type ReadoutChanges } from './readout-change.js';
export { balancedWeights, crossValidateLogistic, featureScaling, fitLogistic, meanLogLoss, predictLogits, sigmoid, standardiseRows, stratifiedFolds, type LogisticCvOptions, type LogisticCvResult, type LogisticFitOptions, type LogisticModel } from '../stats/logistic-regression.js';
