/**
 * Sonde's public library API. The CLI (`bin/sonde`) is a thin shell over these functions.
 *
 * Data flows one way: stimuli → session → snapshot → analysis → report.
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

// session
export { createNetworkSession, type NetworkSession, type NetworkSessionOptions, type FloatTensor } from './session/network-session.js';

// stimuli
export { openStimulusSource, type StimulusSource, type StimulusSourceOptions } from './stimuli/source.js';
export { parseNpy, formatNpy, type NpyTensor } from './stimuli/npy.js';
export type { Preprocessing } from './stimuli/preprocess.js';

// snapshot
export { openSnapshot, type Snapshot, type LayerBatch, type ReadLayerOptions } from './snapshot/snapshot.js';
export { readManifest, FORMAT_VERSION, type SnapshotManifest, type ManifestLayer, type KeepMode, type ActivationDtype } from './snapshot/manifest.js';

// pipelines
export { inspectModel, type ModelInspection, type LayerInfo, type InspectOptions } from './pipeline/inspect-model.js';
export { recordSnapshot, type RecordOptions, type RecordSummary, type RecordProgress } from './pipeline/record-snapshot.js';
export { recordModulated, type RecordModulatedOptions } from './pipeline/record-modulated.js';
export { diffSnapshots, assertPaired, type DiffOptions, type DiffReport, type LayerDiffRow, type TaskReport, type SchemeComparison } from './pipeline/diff-snapshots.js';

export { tuneSnapshot, type TuneOptions, type TuneResult } from './pipeline/tune.js';
export { DEFAULT_OFFSET_STEP, DEFAULT_STEP, defaultStep, SENSE_METHODS, senseSites, type SenseMethod, type SenseOptions, type SenseResult, type SiteSensitivity } from './pipeline/sense.js';
export { compareTables, type TableComparison } from './pipeline/compare-tables.js';
export { loadModulationTables } from './pipeline/tables.js';
export { sweepModulations, type SweepOptions } from './pipeline/sweep.js';
export type { SweepResult, SweepCell } from './pipeline/sweep-types.js';
export { runDemo, type DemoOptions, type DemoResult } from './pipeline/demo.js';
export type { SweepEvaluation } from './pipeline/held-out.js';
export { scoreGains, type GainScoringOptions } from './pipeline/gain-scores.js';
export { fitSiteCeilings, type SiteCeiling, type SiteCeilingOptions } from './pipeline/ceiling.js';
export { compareAtSize, type SizeMatchedComparison, type SizeMatchedOptions, type SchemeEffect } from './pipeline/size-matched.js';
export { fitGainCeiling, type GainCeilingFit, type GainCeilingProblem } from './analysis/gain-ceiling.js';
export { readTuningTable, readSensitivityTable, writeTuningTable, writeSensitivityTable } from './snapshot/tables.js';

export { checkSnapshot, type CheckReport, type CheckProblem } from './snapshot/check.js';
export { mergeSnapshots, type MergeOptions, type MergeSummary } from './pipeline/merge.js';
export { parseShard, shardRange, type ShardSpec, type ShardRange } from './pipeline/shard.js';

// modulation and analysis (pure)
export * as modulation from './modulation/index.js';
export * as analysis from './analysis/index.js';

// report
export { renderHtmlReport, writeHtmlReport, buildHtmlReport } from './report/html/html-report.js';
export { renderDiffReport, renderComparison, diffToCsv, reportToJson } from './report/diff-table.js';
