/**
 * The collecting pass of a diff: every recorded layer of both snapshots streamed once through a
 * `LayerDiffAccumulator` (src/analysis/layer-diff.ts), the floor pairing likewise, and the read-out
 * scores and labels of the detection task. Shards collect their range; collections merge exactly.
 */
import { UsageError } from '../errors.js';
import { LayerDiffAccumulator } from '../analysis/layer-diff.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { layerLayout, type ManifestLayer } from '../snapshot/manifest.js';
import { featureFirstOrder, layoutGeometry } from '../graph/layout.js';
import { alignBatches } from './align-batches.js';
import { parseDetectionTask, type CollectedTask } from './diff-task.js';
import { categoryReadout, type CategoryReadout } from './category-readout.js';
import { mapTag } from '../graph/category-map.js';
import { groupScores } from '../stats/log-sum-exp.js';
import type { DiffOptions } from './diff-types.js';
import { tuningUnit, type TuningUnit } from './tune.js';

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

/** One layer's statistics gathered by `collectDiff`. */
export interface CollectedLayer {
  name: string;
  op: string;
  depth: number;
  /** Weight layers from the input to this tensor (manifest `weightDepth`); null in snapshots of older builds. */
  weightDepth: number | null;
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
  /** What a channel mean is of at this layer, from its layout (`tuningUnit`): channels, or features of a token tensor. */
  unit?: TuningUnit;
}


/**
 * Everything a diff needs from the snapshots, gathered over all stimuli or over one index range (a
 * shard): the per-layer accumulators and the read-out scores. `finishDiff` turns it into the report;
 * collections of disjoint consecutive ranges combine exactly (see src/compare/partials.ts (diff, tune) and src/replay/sense-partial.ts).
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
  let readout: CategoryReadout | null = null;
  let categories: string[] = [];
  if (taskText) {
    readout = categoryReadout(base, options.readoutMap);
    categories = parseDetectionTask(taskText, readout.kinds, base.categories);
  }
  const collected: CollectedLayer[] = [];
  for (let ordinal = 0; ordinal < layers.length; ordinal++) {
    const entry = layers[ordinal]!;
    const tuning = options.tuning?.(entry.name);
    const accumulator = await accumulateLayer(base, mod, entry, tolerance, tuning !== undefined, range);
    const floor = floorSnapshot ? await accumulateLayer(base, floorSnapshot, entry, tolerance, false, range) : null;
    const modEntry = mod.layer(entry.name);
    collected.push({ name: entry.name, op: entry.op, depth: entry.depth, weightDepth: entry.weightDepth ?? null, baseDtype: entry.dtype, modDtype: modEntry.dtype, unchanged: modEntry.from === 'baseline', accumulator, floor, tuning: tuning ?? null, unit: tuningUnit(layerLayout(entry)) });
    options.onLayer?.(ordinal + 1, layers.length, entry.name);
  }
  if (readout) {
    const first = range ? range[0] : base.firstIndex;
    const end = range ? range[1] : base.firstIndex + base.manifest.stimuli.count;
    // under a readout map the scores are the categories' log-sum-exp over their units, [n, G]
    const map = readout.map;
    const scores = map ? (raw: Float32Array) => Float32Array.from(groupScores(raw, end - first, readout!.width, map.groups)) : (raw: Float32Array) => raw;
    task = {
      readout: readout.layer,
      kinds: readout.kinds,
      modelThreshold: readout.threshold,
      categories,
      units: map ? map.groups.length : readout.width,
      baseScores: scores(await readMeans(base, readout.layer, first, end)),
      modScores: scores(await readMeans(mod, readout.layer, first, end)),
      labels: base.stimuli.labels.slice(first - base.firstIndex, end - base.firstIndex),
      ...(map ? { map: mapTag(map)! } : {}),
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
  // the accumulator reads each channel as one run: tokens and channels-last rows are put in that order first
  const layout = layoutGeometry(entry.shape, layerLayout(entry));
  const reorder = full && layout.outer > 1;
  const scratch = [new Float32Array(0), new Float32Array(0)];
  const ordered = (values: Float32Array, rows: number, side: 0 | 1): Float32Array => {
    if (!reorder) return values;
    if (scratch[side]!.length < rows * width) scratch[side] = new Float32Array(rows * width);
    return featureFirstOrder(values, rows, layout, scratch[side]!.subarray(0, rows * width));
  };
  if (sameFile) {
    // identical bytes: read once and compare the data with itself
    for await (const batch of base.readLayer(entry.name, read)) {
      const values = ordered(full ? batch.activation! : batch.channelMeans, batch.rows, 0);
      accumulator.add(values, values, batch.rows);
    }
  } else {
    const left = base.readLayer(entry.name, read);
    const right = mod.readLayer(entry.name, read);
    for await (const part of alignBatches(left, right, width, geometry.channels, entry.name)) accumulator.add(ordered(part.a, part.rows, 0), ordered(part.b, part.rows, 1), part.rows);
  }
  return accumulator;
}

export { readoutOf } from './category-readout.js';
