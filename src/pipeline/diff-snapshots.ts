import { RuntimeFailure, UsageError } from '../errors.js';
import { bootstrapIntervals, type BootstrapInterval } from '../analysis/bootstrap.js';
import { readoutChanges } from '../analysis/readout-change.js';
import { rocAuc, rocAucWeighted, rocOrder } from '../analysis/roc.js';
import { depthTrend, fitDepthProfile, FLAT_PROFILE_CHANGE, type DepthProfile } from '../analysis/depth-profile.js';
import { LayerDiffAccumulator } from '../analysis/layer-diff.js';
import { fitSignature, type SignatureFit } from '../analysis/signature.js';
import { accuracyMaximisingThreshold, detectFromScores, type DetectionStats } from '../analysis/signal-detection.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import type { ManifestLayer } from '../snapshot/manifest.js';
import { signed } from '../report/format.js';
import { alignBatches } from './align-batches.js';

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
  /** Position among the snapshot's recorded layers (0-based): the unit of depth profiles. */
  ordinal: number;
  /** This layer is a modulation site. */
  site: boolean;
  /** Depth below the (first) site in recorded layers; negative above it. */
  belowSite: number;
  relativeChange: number;
  relativeChangeMedian: number;
  cosine: number;
  pearson: number;
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
  /** Bootstrap intervals over stimuli of the changes (one set of resamples for all three). */
  ci: { dPrime: [number, number]; accuracyPp: [number, number]; auc: [number, number] } | null;
  /** ROC area of the readout (threshold-free), base and mod, their difference and its bootstrap interval. */
  auc: { base: number; mod: number; change: number; ci: [number, number] | null };
  /** Hit rate of the modulated ROC at the baseline's false-alarm rate minus the baseline ROC's there, in pp. */
  matchedHitRatePp: number;
  /** Baseline scores shifted by the constant that reproduces the modulated false-alarm rate: hit rate and d′ vs base. */
  criterionControl: { shift: number; hitRatePp: number; dPrime: number };
}

/** Task read-out: per category and averaged over categories. */
export interface TaskReport {
  kind: 'detect';
  readout: string;
  thresholdRule: string;
  categories: TaskCategory[];
  base: DetectionStats;
  mod: DetectionStats;
  change: TaskCategory['change'];
  ci: TaskCategory['ci'];
  /** Means over categories (the interval is of the mean change). */
  auc: TaskCategory['auc'];
  matchedHitRatePp: number;
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

/**
 * Checks that two snapshots can be compared: same model file hash, same stimuli (content digest) and
 * the same layers.
 * @throws UsageError with a one-line reason otherwise.
 */
export function assertPaired(base: Snapshot, mod: Snapshot): void {
  const a = base.manifest;
  const b = mod.manifest;
  if (a.model.sha256 !== b.model.sha256) throw new UsageError('E_PAIRING', `${mod.folder} was recorded from another model than ${base.folder} (${b.model.file} vs ${a.model.file}, different sha256)`);
  if (a.stimuli.digest !== b.stimuli.digest) throw new UsageError('E_PAIRING', `${mod.folder} was recorded on other stimuli than ${base.folder} (stimuli digests differ)`);
  const names = (m: typeof a) => m.layers.map((l) => l.name).join('\n');
  if (names(a) !== names(b)) throw new UsageError('E_PAIRING', `${mod.folder} recorded other layers than ${base.folder} (${b.layers.length} vs ${a.layers.length})`, { hint: 'record the modulated run with --from BASELINE' });
}

/** Names of the modulated sites recorded in a snapshot's manifest. */
export function modulationSites(snapshot: Snapshot): string[] {
  const modulation = snapshot.manifest.modulation as { modulations?: Array<{ site?: string }> } | null;
  return (modulation?.modulations ?? []).map((m) => m.site ?? '').filter((s) => s.length > 0);
}

/** Numerical floor of relative change for a storage type: four units of roundoff (common practice). */
export function dtypeFloor(dtype: string): number {
  return dtype === 'float16' ? 4 * 2 ** -11 : 4 * 2 ** -24;
}

/**
 * Diffs a modulated snapshot against its baseline, layer by layer, streaming both batch by batch
 * (memory: one batch per side plus per-stimulus summaries). See `DiffReport` for what is measured.
 * @throws UsageError when the snapshots do not pair or an option is malformed.
 */
export async function diffSnapshots(options: DiffOptions & { vs?: undefined }): Promise<DiffReport>;
export async function diffSnapshots(options: DiffOptions & { vs: string | Snapshot }): Promise<SchemeComparison>;
export async function diffSnapshots(options: DiffOptions): Promise<DiffReport | SchemeComparison>;
export async function diffSnapshots(options: DiffOptions): Promise<DiffReport | SchemeComparison> {
  const base = typeof options.base === 'string' ? openSnapshot(options.base) : options.base;
  const mod = typeof options.mod === 'string' ? openSnapshot(options.mod) : options.mod;
  if (options.vs !== undefined) {
    const other = typeof options.vs === 'string' ? openSnapshot(options.vs) : options.vs;
    assertPaired(base, other);
    const a = await diffOne(base, mod, options);
    const b = await diffOne(base, other, options);
    return compareSchemes(a, b);
  }
  return diffOne(base, mod, options);
}

async function diffOne(base: Snapshot, mod: Snapshot, options: DiffOptions): Promise<DiffReport> {
  return finishDiff(await collectDiff(base, mod, options), options);
}

/** One layer's statistics gathered by `collectDiff`. */
export interface CollectedLayer {
  name: string;
  op: string;
  depth: number;
  /** Storage types of the two sides (they set the roundoff floor). */
  baseDtype: string;
  modDtype: string;
  /** The modulated side references the baseline's file. */
  unchanged: boolean;
  /** Baseline versus modulated. */
  accumulator: LayerDiffAccumulator;
  /** Baseline versus the floor snapshot, when one is given. */
  floor: LayerDiffAccumulator | null;
  /** Tuning values for the signature, when a tuning lookup gives them. */
  tuning: Float64Array | null;
}

/** The read-out scores gathered by `collectDiff` for the detection task. */
export interface CollectedTask {
  /** Readout layer and the category of each unit. */
  readout: string;
  kinds: string[];
  modelThreshold: number | undefined;
  /** The task's categories (validated). */
  categories: string[];
  /** Units of the readout layer. */
  units: number;
  /** [N, units] channel means of the readout layer, both sides, and each stimulus's labels. */
  baseScores: Float32Array;
  modScores: Float32Array;
  labels: string[][];
}

/**
 * Everything a diff needs from the snapshots, gathered over all stimuli or over one index range (a
 * shard): the per-layer accumulators and the read-out scores. `finishDiff` turns it into the report;
 * collections of disjoint consecutive ranges combine exactly (see src/pipeline/partial-stats.ts).
 */
export interface DiffCollection {
  base: { folder: string };
  mod: { folder: string; modulation: unknown };
  floor: { folder: string } | null;
  sites: string[];
  /** Stimuli gathered. */
  stimuli: number;
  layers: CollectedLayer[];
  task: CollectedTask | null;
}

/**
 * Reads two paired snapshots (and the floor snapshot) layer by layer into accumulators.
 * @param base, mod the snapshots.
 * @param options the diff options (tolerance, floor, tuning, task, bootstrap checked here).
 * @param range global stimulus indices [start, end) to gather; default all.
 * @returns the collection (see `DiffCollection`).
 * @throws UsageError when the snapshots do not pair or an option is malformed.
 */
export async function collectDiff(base: Snapshot, mod: Snapshot, options: DiffOptions, range?: [number, number]): Promise<DiffCollection> {
  assertPaired(base, mod);
  const resamples = options.bootstrap ?? 1000;
  if (!Number.isInteger(resamples) || resamples < 0) throw new UsageError('E_BOOTSTRAP', `--bootstrap must be a non-negative integer, got ${resamples}`);
  const tolerance = options.tolerance ?? 0.01;
  const layers = base.manifest.layers;
  const floorSnapshot = options.floor === undefined ? null : typeof options.floor === 'string' ? openSnapshot(options.floor) : options.floor;
  if (floorSnapshot) assertPaired(base, floorSnapshot);
  const taskText = options.task ?? (options.target ? `detect:${options.target}` : undefined);
  let task: CollectedTask | null = null;
  let readout: ReturnType<typeof readoutOf> | null = null;
  let categories: string[] = [];
  if (taskText) {
    readout = readoutOf(base);
    categories = parseDetectionTask(taskText, readout.kinds, base.categories);
  }
  const collected: CollectedLayer[] = [];
  for (let ordinal = 0; ordinal < layers.length; ordinal++) {
    const entry = layers[ordinal]!;
    const tuning = options.tuning?.(entry.name);
    const accumulator = await accumulateLayer(base, mod, entry, tolerance, tuning !== undefined, range);
    const floor = floorSnapshot ? await accumulateLayer(base, floorSnapshot, entry, tolerance, false, range) : null;
    const modEntry = mod.layer(entry.name);
    collected.push({ name: entry.name, op: entry.op, depth: entry.depth, baseDtype: entry.dtype, modDtype: modEntry.dtype, unchanged: modEntry.from === 'baseline', accumulator, floor, tuning: tuning ?? null });
    options.onLayer?.(ordinal + 1, layers.length, entry.name);
  }
  if (readout) {
    const first = range ? range[0] : base.firstIndex;
    const end = range ? range[1] : base.firstIndex + base.manifest.stimuli.count;
    task = {
      readout: readout.layer,
      kinds: readout.kinds,
      modelThreshold: readout.threshold,
      categories,
      units: base.layerGeometry(readout.layer).channels,
      baseScores: await readMeans(base, readout.layer, first, end),
      modScores: await readMeans(mod, readout.layer, first, end),
      labels: base.stimuli.labels.slice(first - base.firstIndex, end - base.firstIndex),
    };
  }
  return {
    base: { folder: base.folder },
    mod: { folder: mod.folder, modulation: mod.manifest.modulation },
    floor: floorSnapshot ? { folder: floorSnapshot.folder } : null,
    sites: modulationSites(mod),
    stimuli: collected[0]?.accumulator.count ?? 0,
    layers: collected,
    task,
  };
}

/** Channel means of a layer for global stimuli [first, end), [end − first, C]. */
async function readMeans(snapshot: Snapshot, layer: string, first: number, end: number): Promise<Float32Array> {
  const { channels } = snapshot.layerGeometry(layer);
  const out = new Float32Array((end - first) * channels);
  let filled = 0;
  for await (const batch of snapshot.readLayer(layer, { activation: false, range: [first, end] })) {
    if (batch.index[0] !== first + filled) throw new UsageError('E_PAIRING', `layer "${layer}" of ${snapshot.folder}: stimulus ${batch.index[0]} where ${first + filled} was expected`);
    out.set(batch.channelMeans, filled * channels);
    filled += batch.rows;
  }
  if (filled !== end - first) throw new UsageError('E_PAIRING', `layer "${layer}" of ${snapshot.folder} holds ${filled} of stimuli ${first}..${end - 1}`);
  return out;
}

/**
 * Turns a collection into the diff report: per-layer metrics, noise floor, bootstrap intervals,
 * signatures, survival, depth profile, detection read-out and verdict.
 * @param collection from `collectDiff` (or merged partial collections).
 * @param options bootstrap, seed, tolerance and threshold as given to `collectDiff`.
 * @returns the report.
 * @throws UsageError when a layer holds no stimuli.
 */
export async function finishDiff(collection: DiffCollection, options: Pick<DiffOptions, 'bootstrap' | 'seed' | 'tolerance' | 'threshold' | 'measure'>): Promise<DiffReport> {
  const resamples = options.bootstrap ?? 1000;
  const seed = options.seed ?? 0;
  const tolerance = options.tolerance ?? 0.01;
  const sites = collection.sites;
  const siteOrdinal = Math.min(...sites.map((s) => collection.layers.findIndex((l) => l.name === s)).filter((i) => i >= 0), Number.POSITIVE_INFINITY);
  const rows: LayerDiffRow[] = [];
  for (let ordinal = 0; ordinal < collection.layers.length; ordinal++) {
    const layer = collection.layers[ordinal]!;
    const metrics = layer.accumulator.finish();
    const norms = layer.accumulator.perStimulusNorms();
    let floor = dtypeFloor(layer.modDtype === 'float16' || layer.baseDtype === 'float16' ? 'float16' : 'float32');
    if (layer.floor) floor = Math.max(floor, layer.floor.finish().relativeChange);
    let ci: [number, number] | null = null;
    if (resamples > 0 && metrics.stimuli > 1) {
      const [interval] = bootstrapIntervals(metrics.stimuli, (idx, out) => {
        let dd = 0;
        let aa = 0;
        for (let i = 0; i < idx.length; i++) {
          dd += norms.diffSquared[idx[i]!]!;
          aa += norms.baseSquared[idx[i]!]!;
        }
        out[0] = aa > 0 ? Math.sqrt(dd / aa) : dd > 0 ? Infinity : 0;
      }, 1, { resamples, seed: `${seed}:${layer.name}` });
      ci = [interval!.low, interval!.high];
    }
    let signature: LayerDiffRow['signature'] = null;
    if (layer.tuning) {
      const means = layer.accumulator.channelMeans();
      const fit = fitSignature({ baseChannelMeans: means.base, modChannelMeans: means.mod, stimuli: means.stimuli, channels: means.channels, tuning: layer.tuning, tolerance, ...(resamples > 0 ? { bootstrap: { resamples, seed: `${seed}:sig:${layer.name}` } } : {}) });
      const { normalisedRank: _r, ratio: _q, ...rest } = fit;
      signature = rest;
    }
    rows.push({
      name: layer.name,
      op: layer.op,
      depth: layer.depth,
      ordinal,
      site: sites.includes(layer.name),
      belowSite: Number.isFinite(siteOrdinal) ? ordinal - siteOrdinal : Number.NaN,
      relativeChange: metrics.relativeChange,
      relativeChangeMedian: metrics.relativeChangeMedian,
      cosine: metrics.cosine,
      pearson: metrics.pearson,
      channelRatioMean: metrics.channelRatioMean,
      channelRatioSd: metrics.channelRatioSd,
      fractionUp: metrics.fractionUp,
      fractionDown: metrics.fractionDown,
      effectSize: metrics.effectSize,
      nonFinite: metrics.nonFinite,
      floor,
      // non-finite data have no meaningful place relative to the floor
      aboveFloor: metrics.nonFinite.base + metrics.nonFinite.mod === 0 && metrics.relativeChange > floor,
      relativeChangeCi: ci,
      signature,
      unchanged: layer.unchanged,
    });
  }
  const below = rows.filter((r) => r.belowSite > 0);
  const surviving = below.filter((r) => r.aboveFloor);
  const deepest = surviving.length > 0 ? surviving[surviving.length - 1]! : null;
  const depthProfile = fitDepthProfile(below.map((r) => ({ depth: r.belowSite, value: r.relativeChange })), { floor: Math.max(...below.map((r) => r.floor), 0) });
  const task = collection.task ? taskReadout(collection.task, options.threshold ?? 'auto', resamples, seed, options.measure ?? 'auc') : null;
  const report: DiffReport = {
    base: { folder: collection.base.folder, modulation: null },
    mod: { folder: collection.mod.folder, modulation: collection.mod.modulation },
    sites,
    stimuli: collection.stimuli,
    layers: rows,
    floor: collection.floor ? { source: 'snapshot', description: `relative change of ${collection.floor.folder} against the baseline (at least the dtype floor)` } : { source: 'dtype', description: 'four units of float roundoff of the stored dtype' },
    survival: { layer: deepest?.name ?? null, belowSite: deepest?.belowSite ?? null },
    depthProfile,
    task,
    verdict: '',
  };
  report.verdict = verdictOf(report);
  return report;
}

/** Streams one layer of two snapshots through a LayerDiffAccumulator (rows in `range` only, when given). */
async function accumulateLayer(base: Snapshot, mod: Snapshot, entry: ManifestLayer, tolerance: number, keepMeans: boolean, range?: [number, number]): Promise<LayerDiffAccumulator> {
  const geometry = base.layerGeometry(entry.name);
  const modEntry = mod.layer(entry.name);
  const full = entry.keep === 'full' && modEntry.keep === 'full';
  const spatial = full ? geometry.spatial : 1;
  const width = full ? geometry.elements : geometry.channels;
  const expected = range ? range[1] - range[0] : base.manifest.stimuli.count;
  const accumulator = new LayerDiffAccumulator({ elements: width, channels: geometry.channels, spatial, tolerance, layer: entry.name, expectedStimuli: expected, keepChannelMeans: keepMeans });
  const read = { activation: full, reuse: true, ...(range ? { range } : {}) };
  const sameFile = modEntry.from === 'baseline' && entry.sha256 !== undefined && modEntry.sha256 === entry.sha256;
  if (sameFile) {
    // identical bytes: read once and compare the data with itself
    for await (const batch of base.readLayer(entry.name, read)) {
      const values = full ? batch.activation! : batch.channelMeans;
      accumulator.add(values, values, batch.rows);
    }
  } else {
    const left = base.readLayer(entry.name, read);
    const right = mod.readLayer(entry.name, read);
    for await (const part of alignBatches(left, right, width, geometry.channels, entry.name)) accumulator.add(part.a, part.b, part.rows);
  }
  return accumulator;
}

/** Resolves the readout layer and the unit of each category (from the manifest's readout, else the last layer when its width equals the category count). */
export function readoutOf(base: Snapshot): { layer: string; kinds: string[]; threshold: number | undefined } {
  const readout = base.manifest.readout;
  if (readout) return { layer: readout.name, kinds: readout.kinds, threshold: readout.threshold };
  const last = base.manifest.layers[base.manifest.layers.length - 1]!;
  const units = base.layerGeometry(last.name).channels;
  if (units === base.categories.length) return { layer: last.name, kinds: base.categories, threshold: undefined };
  throw new UsageError('E_TASK', `cannot tell which readout unit belongs to which category: the snapshot's model has no sidecar naming its outputs, and its last layer "${last.name}" has ${units} units for ${base.categories.length} categories`, {
    hint: 'write MODEL.json beside the model with {"outputs": {"name": ..., "kinds": [...]}} and record again',
  });
}

function taskReadout(collected: CollectedTask, rule: number | 'best' | 'auto', resamples: number, seed: number, measure: 'auc' | 'dprime'): TaskReport {
  const { categories, units, baseScores, modScores, labels } = collected;
  const readout = { layer: collected.readout, kinds: collected.kinds, threshold: collected.modelThreshold };
  const n = labels.length;
  const perCategory: TaskCategory[] = [];
  const columns: Array<{ a: Float64Array; b: Float64Array; signal: Uint8Array; threshold: number }> = [];
  for (const category of categories) {
    const unit = readout.kinds.indexOf(category);
    const a = new Float64Array(n);
    const b = new Float64Array(n);
    const signal = new Uint8Array(n);
    for (let i = 0; i < n; i++) {
      a[i] = baseScores[i * units + unit]!;
      b[i] = modScores[i * units + unit]!;
      signal[i] = labels[i]!.includes(category) ? 1 : 0;
    }
    const threshold = chooseThreshold(rule, readout.threshold, a, signal);
    const sb = detectFromScores(a, signal, threshold);
    const sm = detectFromScores(b, signal, threshold);
    columns.push({ a, b, signal, threshold });
    const ci = resamples > 0 ? bootstrapChange([columns[columns.length - 1]!], resamples, `${seed}:task:${category}`) : null;
    const aucBase = rocAuc(a, signal);
    const aucMod = rocAuc(b, signal);
    const readouts = readoutChanges({ scores: a, signal, threshold, detection: sb }, b, sm.falseAlarmRate);
    perCategory.push({
      category,
      unit,
      threshold,
      signalTrials: sb.counts.signalTrials,
      noiseTrials: sb.counts.noiseTrials,
      base: pick(sb),
      mod: pick(sm),
      change: changeOf(sb, sm),
      ci,
      auc: { base: aucBase, mod: aucMod, change: aucMod - aucBase, ci: ci ? ci.auc : null },
      matchedHitRatePp: readouts.matchedHitRatePp,
      criterionControl: readouts.criterionControl,
    });
  }
  const average = (f: (s: DetectionStats) => number, side: 'base' | 'mod') => perCategory.reduce((sum, c) => sum + f(c[side]), 0) / perCategory.length;
  const meanStats = (side: 'base' | 'mod'): DetectionStats => ({
    hitRate: average((s) => s.hitRate, side),
    falseAlarmRate: average((s) => s.falseAlarmRate, side),
    dPrime: average((s) => s.dPrime, side),
    criterion: average((s) => s.criterion, side),
    accuracy: average((s) => s.accuracy, side),
    adjustedHitRate: average((s) => s.adjustedHitRate, side),
    adjustedFalseAlarmRate: average((s) => s.adjustedFalseAlarmRate, side),
    corrected: perCategory.some((c) => c[side].corrected),
  });
  const baseMean = meanStats('base');
  const modMean = meanStats('mod');
  const meanOf = (f: (c: TaskCategory) => number) => perCategory.reduce((sum, c) => sum + f(c), 0) / perCategory.length;
  // with one category the mean is that category, and so is its interval (same resamples)
  const ci = resamples > 0 ? (perCategory.length === 1 ? perCategory[0]!.ci : bootstrapChange(columns, resamples, `${seed}:task`)) : null;
  return {
    kind: 'detect',
    readout: readout.layer,
    thresholdRule: typeof rule === 'number' ? `fixed threshold ${rule}` : rule === 'auto' && readout.threshold !== undefined ? `the model's threshold ${readout.threshold} (sidecar)` : 'accuracy-maximising threshold on the baseline, held fixed for the modulated run',
    categories: perCategory,
    base: baseMean,
    mod: modMean,
    change: changeOf(baseMean, modMean),
    ci,
    auc: { base: meanOf((c) => c.auc.base), mod: meanOf((c) => c.auc.mod), change: meanOf((c) => c.auc.change), ci: ci ? ci.auc : null },
    matchedHitRatePp: meanOf((c) => c.matchedHitRatePp),
    criterionControl: { hitRatePp: meanOf((c) => c.criterionControl.hitRatePp), dPrime: meanOf((c) => c.criterionControl.dPrime) },
    measure,
  };
}

/**
 * Categories of a detection task: `detect:A,B`, `detect:all` or `labels` (every category that has a
 * readout unit and labelled stimuli).
 * @throws UsageError naming a category without a readout unit or without stimuli.
 */
export function parseDetectionTask(taskText: string, kinds: readonly string[], present: readonly string[]): string[] {
  let categories: string[];
  if (taskText === 'labels' || taskText === 'detect:all') categories = kinds.filter((k) => present.includes(k));
  else if (taskText.startsWith('detect:')) {
    categories = taskText.slice(7).split(',').map((c) => c.trim()).filter((c) => c.length > 0);
    for (const category of categories) {
      if (!kinds.includes(category)) throw new UsageError('E_TASK', `--task ${taskText}: "${category}" has no readout unit (units: ${kinds.join(', ')})`);
      if (!present.includes(category)) throw new UsageError('E_TASK', `--task ${taskText}: no stimulus is labelled "${category}"`);
    }
  } else throw new UsageError('E_TASK', `--task must be detect:CATEGORY[,CATEGORY…], detect:all or labels, got "${taskText}"`);
  if (categories.length === 0) throw new UsageError('E_TASK', `--task ${taskText}: no category has both a readout unit and labelled stimuli`);
  return categories;
}

/** The decision threshold of a category under `rule` (see DiffOptions.threshold). */
export function chooseThreshold(rule: number | 'best' | 'auto', modelThreshold: number | undefined, scores: Float64Array, signal: Uint8Array): number {
  if (typeof rule === 'number') return rule;
  if (rule === 'auto' && modelThreshold !== undefined) return modelThreshold;
  return accuracyMaximisingThreshold(scores, signal).threshold;
}

function pick(s: DetectionStats): DetectionStats {
  return { hitRate: s.hitRate, falseAlarmRate: s.falseAlarmRate, adjustedHitRate: s.adjustedHitRate, adjustedFalseAlarmRate: s.adjustedFalseAlarmRate, dPrime: s.dPrime, criterion: s.criterion, accuracy: s.accuracy, corrected: s.corrected };
}

function changeOf(a: DetectionStats, b: DetectionStats): TaskCategory['change'] {
  return {
    hitRatePp: 100 * (b.hitRate - a.hitRate),
    falseAlarmRatePp: 100 * (b.falseAlarmRate - a.falseAlarmRate),
    accuracyPp: 100 * (b.accuracy - a.accuracy),
    dPrime: b.dPrime - a.dPrime,
    criterion: b.criterion - a.criterion,
  };
}

/**
 * Paired bootstrap over stimuli of the mean change in d′, accuracy and ROC area across the given
 * categories (the ROC areas from multiplicities over one sort per column, see `rocAucWeighted`).
 */
function bootstrapChange(columns: Array<{ a: Float64Array; b: Float64Array; signal: Uint8Array; threshold: number }>, resamples: number, seed: string): TaskCategory['ci'] {
  const n = columns[0]!.a.length;
  if (n < 2) return null;
  const a = new Float64Array(n);
  const b = new Float64Array(n);
  const s = new Uint8Array(n);
  const weights = new Float64Array(n);
  const orders = columns.map((column) => ({ a: rocOrder(column.a), b: rocOrder(column.b) }));
  const intervals: BootstrapInterval[] = bootstrapIntervals(n, (idx, out) => {
    let dp = 0;
    let acc = 0;
    let auc = 0;
    weights.fill(0);
    for (let i = 0; i < idx.length; i++) weights[idx[i]!]! += 1;
    for (let k = 0; k < columns.length; k++) {
      const column = columns[k]!;
      for (let i = 0; i < idx.length; i++) {
        a[i] = column.a[idx[i]!]!;
        b[i] = column.b[idx[i]!]!;
        s[i] = column.signal[idx[i]!]!;
      }
      let signals = 0;
      for (let i = 0; i < n; i++) signals += s[i]!;
      if (signals === 0 || signals === n) {
        out[0] = Number.NaN;
        out[1] = Number.NaN;
        out[2] = Number.NaN;
        return;
      }
      const sa = detectFromScores(a, s, column.threshold);
      const sb = detectFromScores(b, s, column.threshold);
      dp += sb.dPrime - sa.dPrime;
      acc += 100 * (sb.accuracy - sa.accuracy);
      auc += rocAucWeighted(column.b, column.signal, weights, orders[k]!.b) - rocAucWeighted(column.a, column.signal, weights, orders[k]!.a);
    }
    out[0] = dp / columns.length;
    out[1] = acc / columns.length;
    out[2] = auc / columns.length;
  }, 3, { resamples, seed });
  return { dPrime: [intervals[0]!.low, intervals[0]!.high], accuracyPp: [intervals[1]!.low, intervals[1]!.high], auc: [intervals[2]!.low, intervals[2]!.high] };
}

/**
 * How the relative change develops below the site: "halves every X layers below SITE", "doubles …",
 * or "keeps its size …" when the fitted profile changes it by less than 5 % over the measured stretch
 * (|rate| · layers below the site < 0.05).
 */
export function describeDepthProfile(report: DiffReport): string {
  const profile = report.depthProfile;
  const site = report.sites[0] ?? 'the site';
  const span = Math.max(1, ...report.layers.map((l) => l.belowSite).filter((d) => Number.isFinite(d)));
  if (report.sites.length === 0) return 'has no modulation site recorded in the manifest';
  switch (depthTrend(profile.rate, span)) {
    case 'flat':
      return `keeps its size below ${site} (within ${100 * FLAT_PROFILE_CHANGE} % over ${span} layers)`;
    case 'halves':
      return `halves every ${profile.halfDepth!.toFixed(1)} layers below ${site}`;
    case 'doubles':
      return `doubles every ${profile.doublingDepth!.toFixed(1)} layers below ${site}`;
    default:
      return `has too few layers below ${site} for a depth profile`;
  }
}

/** Layers of a diff holding NaN/±Infinity values on either side. */
export function nonFiniteLayers(report: Pick<DiffReport, 'layers'>): LayerDiffRow[] {
  return report.layers.filter((l) => l.nonFinite.base + l.nonFinite.mod > 0);
}

/**
 * What a diff says instead of a verdict when any layer holds NaN/±Infinity values: no noise-floor,
 * survival, depth or task statement is made on such data (every metric they touch is NaN or infinite).
 * @returns the text, or null when every layer is finite.
 */
export function nonFiniteVerdict(report: Pick<DiffReport, 'layers'>): string | null {
  const tainted = nonFiniteLayers(report);
  if (tainted.length === 0) return null;
  const first = tainted[0]!;
  return `no verdict: the data are non-finite — NaN/±Infinity values in ${tainted.length} of ${report.layers.length} layers, from ${first.name} on (${first.nonFinite.base} baseline and ${first.nonFinite.mod} modulated values there); the metrics they touch are NaN or infinite`;
}

/**
 * The error a command raises after printing a report on non-finite data, so that no script takes it for
 * an answer (exit 1), or null when every layer is finite.
 * @param what names the comparison, e.g. "diff BASE MOD".
 */
export function nonFiniteFailure(report: Pick<DiffReport, 'layers'>, what: string): RuntimeFailure | null {
  const tainted = nonFiniteLayers(report);
  if (tainted.length === 0) return null;
  return new RuntimeFailure('E_NON_FINITE', `${what}: ${tainted.length} of ${report.layers.length} layers hold NaN/±Infinity values (first: ${tainted[0]!.name}); the report has no verdict`, {
    hint: 'the nonfinite_base/nonfinite_mod columns (--csv) and manifest.json layers[].nonFinite show where they start; check the stimuli and the modulation',
  });
}

/** One line saying how far the change propagates and what it does to the task (or, on non-finite data, that there is no verdict). */
export function verdictOf(report: DiffReport): string {
  const refused = nonFiniteVerdict(report);
  if (refused) return refused;
  const parts: string[] = [];
  const subject = report.layers.some((l) => l.signature) ? 'the modulation' : 'the change';
  parts.push(`${subject} ${describeDepthProfile(report)}`);
  if (report.survival.layer) parts.push(`stays above the noise floor down to ${report.survival.layer} (${report.survival.belowSite} layer${report.survival.belowSite === 1 ? '' : 's'} below)`);
  else if (report.sites.length > 0) parts.push('does not rise above the noise floor below the site');
  const siteRow = report.layers.find((l) => l.site && l.signature);
  const lastSignature = [...report.layers].reverse().find((l) => l.signature && l.belowSite > 0);
  if (siteRow?.signature && lastSignature?.signature) {
    parts.push(`signature slope ${siteRow.signature.slope.toFixed(3)} at the site, ${lastSignature.signature.slope.toFixed(3)} at ${lastSignature.name}`);
  }
  if (report.task) {
    const task = report.task;
    const ci = task.ci;
    const auc = `ROC area (threshold-free) ${signed(task.auc.change, 3)}${ci ? ` [${ci.auc[0].toFixed(3)}, ${ci.auc[1].toFixed(3)}]` : ''}`;
    const dPrime = `d′ at the fixed threshold ${signed(task.change.dPrime)}${ci ? ` [${ci.dPrime[0].toFixed(2)}, ${ci.dPrime[1].toFixed(2)}]` : ''}`;
    const rest = `hit rate at the baseline's false-alarm rate ${signed(task.matchedHitRatePp, 1)} pp, accuracy ${signed(task.change.accuracyPp, 1)} pp`;
    parts.push(`detection by ${task.measure === 'dprime' ? `${dPrime} (${auc})` : `${auc} (${dPrime})`}, ${rest}`);
  }
  return parts.join('; ');
}

/** Side-by-side comparison of two schemes against the same baseline. */
export function compareSchemes(a: DiffReport, b: DiffReport, measure: 'auc' | 'dprime' = a.task?.measure ?? 'auc'): SchemeComparison {
  const layers = a.layers.map((la, i) => {
    const lb = b.layers[i]!;
    const larger: 'a' | 'b' | 'equal' = la.relativeChange > lb.relativeChange ? 'a' : lb.relativeChange > la.relativeChange ? 'b' : 'equal';
    const separated = la.relativeChangeCi !== null && lb.relativeChangeCi !== null && (la.relativeChangeCi[0] > lb.relativeChangeCi[1] || lb.relativeChangeCi[0] > la.relativeChangeCi[1]);
    return { name: la.name, depth: la.depth, a: la.relativeChange, b: lb.relativeChange, larger, separated };
  });
  let task: SchemeComparison['task'] = null;
  if (a.task && b.task) {
    const key = measure === 'auc' ? 'auc' : 'dPrime';
    const da = measure === 'auc' ? a.task.auc.change : a.task.change.dPrime;
    const db = measure === 'auc' ? b.task.auc.change : b.task.change.dPrime;
    const separated = a.task.ci !== null && b.task.ci !== null && (a.task.ci[key][0] > b.task.ci[key][1] || b.task.ci[key][0] > a.task.ci[key][1]);
    task = { a: da, b: db, larger: da > db ? 'a' : db > da ? 'b' : 'equal', separated, measure };
  }
  // the layers below every site of both schemes (A and B may modulate different sites)
  const below = layers.filter((_, i) => a.layers[i]!.belowSite > 0 && b.layers[i]!.belowSite > 0);
  const aWins = below.filter((l) => l.larger === 'a').length;
  const bWins = below.filter((l) => l.larger === 'b').length;
  const sameSites = a.sites.length === b.sites.length && a.sites.every((site) => b.sites.includes(site));
  const refused = nonFiniteVerdict(a) ?? nonFiniteVerdict(b);
  if (refused) return { a, b, layers, task, verdict: `${nonFiniteVerdict(a) ? 'A' : 'B'}: ${refused}` };
  const parts = [`below ${sameSites ? 'the site' : "both schemes' sites"}, A changes activity more in ${aWins} of ${below.length} layers and B in ${bWins}`];
  if (task) parts.push(`detection ${task.measure === 'auc' ? 'ROC-area (threshold-free)' : 'd′ (fixed threshold)'} change A ${signed(task.a, task.measure === 'auc' ? 3 : 2)} vs B ${signed(task.b, task.measure === 'auc' ? 3 : 2)}${task.separated ? ' (bootstrap intervals do not overlap)' : ' (within the bootstrap spread)'}`);
  return { a, b, layers, task, verdict: parts.join('; ') };
}
