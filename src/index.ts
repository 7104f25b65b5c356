/**
 * Sonde's public library API. The CLI (`bin/sonde`) is a thin shell over these functions.
 *
 * Data flows one way: stimuli → session → snapshot → analysis → report. The workflows a user runs
 * have a folder each: record/, compare/, replay/, demo/ (see DEVELOPERS.md's layer table).
 */
export { SondeError, UsageError, RuntimeFailure } from './errors.js';
export { TOOL_VERSION } from './version.js';

// graph: load, inspect, instrument, inject
export { loadModel, type LoadedModel, type Dim } from './graph/load-model.js';
export { analyseGraph, type GraphStructure, type GraphNode } from './graph/structure.js';
export { exposeTensors } from './graph/instrument.js';
export { injectModulations, modulationInputNames, modulationInputDims, type InjectionSite } from './graph/inject.js';
export { extractTail, type TailGraph } from './graph/tail.js';
export { selectLayers, globToRegExp } from './graph/select.js';
export { readSidecar, sidecarPath, type ModelSidecar } from './graph/sidecar.js';
export { addReadoutHeads, type ReadoutHeadsSpec, type ReadoutHeadsModel } from './graph/readout-heads.js';

// session
export { createNetworkSession, type NetworkSession, type NetworkSessionOptions, type FloatTensor } from './session/network-session.js';

// stimuli
export { openStimulusSource, type StimulusSource, type StimulusSourceOptions } from './stimuli/source.js';
export { parseNpy, formatNpy, type NpyTensor } from './stimuli/npy.js';
export { NORMALISE_PRESETS, FIT_MODES, INTERPOLATIONS, type Preprocessing, type FitMode, type Interpolation, type NormalisePreset } from './stimuli/preprocess.js';
export { decodeImage, fitGeometry, type FitGeometry } from './stimuli/decode.js';
export { composeStimulusSet, type ComposeOptions, type ComposeSummary, type CompositeLayout } from './stimuli/compose/index.js';

// snapshot
export { openSnapshot, type Snapshot, type LayerBatch, type ReadLayerOptions } from './snapshot/snapshot.js';
export { readManifest, FORMAT_VERSION, READABLE_FORMATS, type SnapshotManifest, type ManifestLayer, type KeepMode, type ActivationDtype } from './snapshot/manifest.js';
export { LAYER_COMPRESSIONS, type LayerCompression } from './snapshot/compression.js';

// record: inspect, record (baseline and modulated), shards
export { inspectModel, type ModelInspection, type LayerInfo, type InspectOptions } from './record/inspect-model.js';
export { recordSnapshot, type RecordOptions, type RecordSummary, type RecordProgress } from './record/record-snapshot.js';
export { recordModulated, type RecordModulatedOptions } from './record/record-modulated.js';
export { mergeSnapshots, type MergeOptions, type MergeSummary } from './record/merge.js';
export { exportSnapshot, type ExportOptions, type ExportResult } from './export/export-snapshot.js';
export { axisNames, EXPORT_FORMAT, type ExportDescription, type ExportLayer, type ExportArrayFile } from './export/export-description.js';
export { parseShard, shardRange, type ShardSpec, type ShardRange } from './record/shard.js';

// compare: diff, tune, tables
export { diffSnapshots } from './compare/diff-snapshots.js';
export { assertPaired } from './compare/diff-collect.js';
export type { DiffOptions, DiffReport, LayerDiffRow, TaskReport, SchemeComparison } from './compare/diff-types.js';
export { tuneSnapshot, type TuneOptions, type TuneResult } from './compare/tune.js';
export { compareTables, type TableComparison } from './compare/compare-tables.js';
export { sizeGaps, sizeGapNote, SIZE_TOLERANCE, type SchemeSize, type SizeGap } from './compare/size-match.js';
export { fitReadoutHeads, DEFAULT_CS, type FitHeadsOptions, type FitHeadsResult, type FittedHead, type HeadScore } from './compare/fit-heads.js';

// replay: sensitivities, sweeps, gain scores, ceiling, size-matched comparison
export { DEFAULT_OFFSET_STEP, DEFAULT_STEP, defaultStep, SENSE_METHODS, type SenseMethod, type SenseOptions, type SenseResult, type SiteSensitivity } from './replay/sense-types.js';
export { senseSites } from './replay/sense.js';
export { loadModulationTables } from './replay/modulation-tables.js';
export { sweepModulations, type SweepOptions } from './replay/sweep.js';
export type { SweepResult, SweepCell } from './replay/sweep-types.js';
export type { SweepEvaluation } from './replay/held-out.js';
export { scoreGains, type GainScoringOptions } from './replay/gain-scores.js';
export { fitSiteCeilings, type SiteCeiling, type SiteCeilingOptions } from './replay/ceiling.js';
export { compareAtSize, type SizeMatchedComparison, type SizeMatchedOptions, type SchemeEffect } from './replay/size-matched.js';
export { runSizeMatched, type SizeMatchedRun, type SizeMatchedRunOptions } from './replay/size-matched-run.js';

// cluster: Slurm job arrays over shards, their merge job and the run's status
export { planClusterRun, readClusterPlan, type ClusterPlanOptions } from './cluster/plan.js';
export { submitClusterRun, parseTaskList, type SubmitOptions, type Submission } from './cluster/submit.js';
export { clusterRunStatus, type RunStatus, type ShardStatus } from './cluster/status.js';
export type { ClusterPlan, TaskResources } from './cluster/plan-types.js';

// demo
export { runDemo, type DemoOptions, type DemoResult } from './demo/demo.js';

// tables and checks
export { fitGainCeiling, type GainCeilingFit, type GainCeilingProblem } from './analysis/gain-ceiling.js';
export { readTuningTable, readSensitivityTable, writeTuningTable, writeSensitivityTable } from './snapshot/tables.js';
export { checkSnapshot, type CheckReport, type CheckProblem } from './snapshot/check.js';

// modulation and analysis (pure)
export * as modulation from './modulation/index.js';
export * as analysis from './analysis/index.js';

// report
export { renderHtmlReport, writeHtmlReport, buildHtmlReport } from './report/html/html-report.js';
export { renderDiffReport, renderComparison, diffToCsv, reportToJson } from './report/diff-table.js';
export { pairPictureData, type PairPictureData, type PairPictureOptions } from './report/pictures/pair-pictures.js';
export { writePairPictures } from './report/pictures/pictures-page.js';
export { sizeMatchedHeadline, diffHeadline, sweepHeadline, type Headline } from './report/headline.js';
export { shortLayerLabels } from './report/layer-labels.js';
export { windowSpatialProfiles, type WindowSpatialProfiles } from './compare/spatial-profiles.js';
