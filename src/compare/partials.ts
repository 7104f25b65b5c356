/**
 * Partial statistics: the map-reduce form of `diff` and `tune` for very large recordings. Each of N
 * processes reads one shard of the stimuli (`--shard K/N`, the split of src/record/shard.ts) of the
 * same snapshots and writes what it accumulated to a JSON file (`--partial FILE.json`); `sonde merge`
 * checks that the files belong together and cover every shard once, folds them together in shard order
 * and computes the same report an unsharded run computes.
 *
 * What a diff shard keeps: per layer the complete `LayerDiffAccumulator` state (compensated pooled sums,
 * pooled Pearson moments, per-channel Welford moments, non-finite counts, and the per-stimulus norms and
 * channel means the median, the bootstrap and the signature need), the floor accumulator, and the
 * read-out scores and labels of its stimuli. What a tune shard keeps: per layer and channel × category
 * the count, mean and M2 (`TuningMoments`). Pooled sums and moments combine by exact formulas (Neumaier
 * sums, Chan–Golub–LeVeque updates), so merged results equal the unsharded ones up to rounding in the
 * last digits; per-stimulus values are concatenated unchanged, so medians and bootstrap intervals (same
 * seed, same order) are identical.
 *
 * The file envelope and the shard-order check are in src/record/partial-file.ts.
 */
import { LayerDiffAccumulator, type LayerDiffState } from '../analysis/layer-diff.js';
import { accumulateTuning, mergeTuningMoments, tuningFromMoments, type TuningMoments, type TuningTable } from '../analysis/tuning.js';
import { RuntimeFailure, UsageError } from '../errors.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { decodeArray, encodeArray, partialObject, PARTIAL_KIND, PARTIAL_VERSION, shardOf, snapshotKey, type OrderedPart, type PartialFile } from '../record/partial-file.js';
import type { ShardSpec } from '../record/shard.js';
import { collectDiff, type CollectedLayer, type DiffCollection } from './diff-collect.js';
import { finishDiff } from './diff-snapshots.js';
import { type DiffOptions, type DiffReport } from './diff-types.js';
import { assembleTuneResult, mapCategories, planTuning, type TuneOptions, type TuneResult } from './tune.js';
import { mapTag, type ReadoutMapTag } from '../graph/category-map.js';

// ---------------------------------------------------------------------------------------------------
// diff

/**
 * Gathers shard `shard` of a diff (see the file comment).
 * @param options the diff options (`vs` is not supported: run one partial diff per scheme).
 * @param shard K of N over the baseline's stimuli.
 * @returns the partial file's content.
 * @throws UsageError as `diffSnapshots` does, for `vs`, and for a shard that would be empty.
 */
export async function diffPartial(options: DiffOptions, shard: ShardSpec): Promise<PartialFile> {
  if (options.vs !== undefined) throw new UsageError('E_PARTIAL', '--partial cannot be combined with --vs; write one partial diff per modulated snapshot');
  const base = typeof options.base === 'string' ? openSnapshot(options.base) : options.base;
  const mod = typeof options.mod === 'string' ? openSnapshot(options.mod) : options.mod;
  const { range, info } = shardOf(base, shard);
  const collection = await collectDiff(base, mod, options, range);
  const key = {
    base: snapshotKey(base),
    mod: snapshotKey(mod),
    floor: collection.floor?.folder ?? null,
    options: { bootstrap: options.bootstrap ?? 1000, seed: options.seed ?? 0, tolerance: options.tolerance ?? 0.01, threshold: options.threshold ?? 'auto', task: options.task ?? null, target: options.target ?? null, ...(options.readoutMap ? { readoutMap: options.readoutMap.sha256 } : {}) },
    layers: collection.layers.map((l) => [l.name, l.tuning ? encodeArray(l.tuning).base64 : null]),
  };
  const data = {
    base: collection.base,
    mod: collection.mod,
    floor: collection.floor,
    sites: collection.sites,
    stimuli: collection.stimuli,
    layers: collection.layers.map((l) => ({
      name: l.name,
      op: l.op,
      depth: l.depth,
      weightDepth: l.weightDepth,
      baseDtype: l.baseDtype,
      modDtype: l.modDtype,
      unchanged: l.unchanged,
      accumulator: encodeState(l.accumulator.exportState()),
      floor: l.floor ? encodeState(l.floor.exportState()) : null,
      tuning: l.tuning ? encodeArray(l.tuning) : null,
      ...(l.unit ? { unit: l.unit } : {}),
    })),
    task: collection.task
      ? { ...collection.task, baseScores: encodeArray(collection.task.baseScores), modScores: encodeArray(collection.task.modScores) }
      : null,
  };
  return { kind: PARTIAL_KIND, version: PARTIAL_VERSION, of: 'diff', shard: info, key, data };
}

function encodeState(state: LayerDiffState): Record<string, unknown> {
  return {
    ...state,
    pooled: encodeArray(state.pooled),
    pearson: encodeArray(state.pearson),
    channelMeanA: encodeArray(state.channelMeanA),
    channelM2A: encodeArray(state.channelM2A),
    channelMeanB: encodeArray(state.channelMeanB),
    stimulusChange: encodeArray(state.stimulusChange),
    stimulusDiffSquared: encodeArray(state.stimulusDiffSquared),
    stimulusBaseSquared: encodeArray(state.stimulusBaseSquared),
    meansA: state.meansA ? encodeArray(state.meansA) : null,
    meansB: state.meansB ? encodeArray(state.meansB) : null,
  };
}

function decodeState(value: unknown, what: string): LayerDiffState {
  const v = partialObject(value, what);
  const number = (key: string) => {
    if (typeof v[key] !== 'number') throw new UsageError('E_PARTIAL', `${what}.${key} must be a number`);
    return v[key] as number;
  };
  if (typeof v['layer'] !== 'string' || typeof v['keepChannelMeans'] !== 'boolean') throw new UsageError('E_PARTIAL', `${what} lacks "layer" or "keepChannelMeans"`);
  return {
    elements: number('elements'),
    channels: number('channels'),
    spatial: number('spatial'),
    tolerance: number('tolerance'),
    layer: v['layer'],
    keepChannelMeans: v['keepChannelMeans'],
    stimuli: number('stimuli'),
    pooled: decodeArray(v['pooled'], 'f64', `${what}.pooled`),
    pearson: decodeArray(v['pearson'], 'f64', `${what}.pearson`),
    channelMeanA: decodeArray(v['channelMeanA'], 'f64', `${what}.channelMeanA`),
    channelM2A: decodeArray(v['channelM2A'], 'f64', `${what}.channelM2A`),
    channelMeanB: decodeArray(v['channelMeanB'], 'f64', `${what}.channelMeanB`),
    nonFiniteBase: number('nonFiniteBase'),
    nonFiniteMod: number('nonFiniteMod'),
    zeroNormStimuli: number('zeroNormStimuli'),
    stimulusChange: decodeArray(v['stimulusChange'], 'f64', `${what}.stimulusChange`),
    stimulusDiffSquared: decodeArray(v['stimulusDiffSquared'], 'f64', `${what}.stimulusDiffSquared`),
    stimulusBaseSquared: decodeArray(v['stimulusBaseSquared'], 'f64', `${what}.stimulusBaseSquared`),
    meansA: v['meansA'] === null ? null : decodeArray(v['meansA'], 'f32', `${what}.meansA`),
    meansB: v['meansB'] === null ? null : decodeArray(v['meansB'], 'f32', `${what}.meansB`),
  };
}

function decodeCollection(part: PartialFile, where: string): DiffCollection {
  const d = part.data;
  const layers = d['layers'];
  if (!Array.isArray(layers)) throw new UsageError('E_PARTIAL', `${where}: data.layers must be a list`);
  const collected: CollectedLayer[] = layers.map((value: unknown, i: number) => {
    const l = partialObject(value, `${where}: data.layers[${i}]`);
    const at = `${where}: data.layers[${i}]`;
    if (typeof l['name'] !== 'string' || typeof l['op'] !== 'string' || typeof l['depth'] !== 'number') throw new UsageError('E_PARTIAL', `${at} lacks name, op or depth`);
    return {
      name: l['name'],
      op: l['op'],
      depth: l['depth'],
      weightDepth: typeof l['weightDepth'] === 'number' ? l['weightDepth'] : null,
      baseDtype: String(l['baseDtype']),
      modDtype: String(l['modDtype']),
      ...(l['unit'] === 'channels' || l['unit'] === 'features' || l['unit'] === 'heads' ? { unit: l['unit'] } : {}),
      unchanged: l['unchanged'] === true,
      accumulator: LayerDiffAccumulator.fromState(decodeState(l['accumulator'], `${at}.accumulator`)),
      floor: l['floor'] === null ? null : LayerDiffAccumulator.fromState(decodeState(l['floor'], `${at}.floor`)),
      tuning: l['tuning'] === null ? null : decodeArray(l['tuning'], 'f64', `${at}.tuning`),
    };
  });
  const taskValue = d['task'];
  let task: DiffCollection['task'] = null;
  if (taskValue !== null) {
    const t = partialObject(taskValue, `${where}: data.task`);
    const labels = t['labels'];
    if (!Array.isArray(labels) || !labels.every((x) => Array.isArray(x) && x.every((y) => typeof y === 'string'))) throw new UsageError('E_PARTIAL', `${where}: data.task.labels must be lists of strings`);
    task = {
      readout: String(t['readout']),
      kinds: (t['kinds'] as string[]).map(String),
      modelThreshold: typeof t['modelThreshold'] === 'number' ? t['modelThreshold'] : undefined,
      categories: (t['categories'] as string[]).map(String),
      units: Number(t['units']),
      baseScores: decodeArray(t['baseScores'], 'f32', `${where}: data.task.baseScores`),
      modScores: decodeArray(t['modScores'], 'f32', `${where}: data.task.modScores`),
      labels: labels as string[][],
      ...(isMapTag(t['map']) ? { map: { name: t['map'].name, sha256: t['map'].sha256 } } : {}),
    };
  }
  const base = partialObject(d['base'], `${where}: data.base`);
  const mod = partialObject(d['mod'], `${where}: data.mod`);
  return {
    base: { folder: String(base['folder']) },
    mod: { folder: String(mod['folder']), modulation: mod['modulation'] ?? null },
    floor: d['floor'] === null ? null : { folder: String(partialObject(d['floor'], `${where}: data.floor`)['folder']) },
    sites: Array.isArray(d['sites']) ? (d['sites'] as unknown[]).map(String) : [],
    stimuli: Number(d['stimuli']),
    layers: collected,
    task,
  };
}

// ---------------------------------------------------------------------------------------------------
// tune

/**
 * Gathers shard `shard` of a tuning run: per layer the tuning moments of the shard's stimuli.
 * @throws UsageError as `tuneSnapshot` does (except that a category may be empty within one shard).
 */
export async function tunePartial(options: TuneOptions, shard: ShardSpec): Promise<PartialFile> {
  const snapshot = typeof options.snapshot === 'string' ? openSnapshot(options.snapshot) : options.snapshot;
  const folder = typeof options.snapshot === 'string' ? options.snapshot : snapshot.folder;
  if (!snapshot.stimuli.labels.some((l) => l.length > 0)) {
    throw new UsageError('E_TUNE_LABELS', `snapshot ${folder} has no labels; tuning needs labelled stimuli`, { hint: 'record it from a class folder, a path,label CSV, or a .npy with --labels' });
  }
  const { categories, layers } = planTuning(snapshot, { ...options, ...(options.readoutMap ? { categories: mapCategories(snapshot, options.readoutMap, folder) } : {}) }, folder);
  const { range, info } = shardOf(snapshot, shard);
  const labels = snapshot.stimuli.labels.slice(range[0] - snapshot.firstIndex, range[1] - snapshot.firstIndex);
  const rows = range[1] - range[0];
  const out: Array<Record<string, unknown>> = [];
  for (const layer of layers) {
    const { channels } = snapshot.layerGeometry(layer.name);
    const means = new Float32Array(rows * channels);
    let filled = 0;
    for await (const batch of snapshot.readLayer(layer.name, { activation: false, range })) {
      if (batch.index[0] !== range[0] + filled) throw new RuntimeFailure('E_LAYER_READ', `layer "${layer.name}" of ${folder}: stimulus ${batch.index[0]} where ${range[0] + filled} was expected`);
      means.set(batch.channelMeans, filled * channels);
      filled += batch.rows;
    }
    const moments = accumulateTuning({ channelMeans: means, stimuli: rows, channels, labels, categories, singleLabel: options.singleLabel ?? false });
    out.push({ name: layer.name, op: layer.op, depth: layer.depth, moments: { ...moments, count: encodeArray(moments.count), mean: encodeArray(moments.mean), m2: encodeArray(moments.m2), nonFinite: encodeArray(moments.nonFinite) } });
  }
  const key = { snapshot: snapshotKey(snapshot), model: snapshot.manifest.model, categories, singleLabel: options.singleLabel ?? false, layers: layers.map((l) => l.name), ...(options.readoutMap ? { readoutMap: mapTag(options.readoutMap) } : {}) };
  return { kind: PARTIAL_KIND, version: PARTIAL_VERSION, of: 'tune', shard: info, key, data: { folder: snapshot.folder, layers: out } };
}

function decodeMoments(value: unknown, what: string): TuningMoments {
  const m = partialObject(value, what);
  if (!Array.isArray(m['categories']) || !Array.isArray(m['otherLabels']) || typeof m['channels'] !== 'number') throw new UsageError('E_PARTIAL', `${what} lacks channels, categories or otherLabels`);
  return {
    channels: m['channels'],
    categories: (m['categories'] as unknown[]).map(String),
    singleLabel: m['singleLabel'] === true,
    count: decodeArray(m['count'], 'i32', `${what}.count`),
    mean: decodeArray(m['mean'], 'f64', `${what}.mean`),
    m2: decodeArray(m['m2'], 'f64', `${what}.m2`),
    nonFinite: decodeArray(m['nonFinite'], 'i32', `${what}.nonFinite`),
    stimuliUsed: Number(m['stimuliUsed']),
    stimuliSkipped: Number(m['stimuliSkipped']),
    otherLabels: (m['otherLabels'] as unknown[]).map(String),
  };
}

/**
 * Combines the diff partials of one run (already checked and ordered by `orderShards`) into the report
 * the unsharded diff gives.
 */
export async function mergeDiffPartials(ordered: readonly OrderedPart[]): Promise<DiffReport> {
  const first = ordered[0]!.part;
  const collections = ordered.map(({ part, path }) => decodeCollection(part, path));
  const merged = collections[0]!;
  for (const next of collections.slice(1)) {
    merged.layers.forEach((layer, i) => {
      const other = next.layers[i]!;
      layer.accumulator.merge(other.accumulator);
      if (layer.floor && other.floor) layer.floor.merge(other.floor);
    });
    if (merged.task && next.task) {
      merged.task.baseScores = concat(merged.task.baseScores, next.task.baseScores);
      merged.task.modScores = concat(merged.task.modScores, next.task.modScores);
      merged.task.labels = [...merged.task.labels, ...next.task.labels];
    }
    merged.stimuli += next.stimuli;
  }
  const o = partialObject(first.key['options'], 'key.options') as { bootstrap: number; seed: number; tolerance: number; threshold: number | 'best' | 'auto' };
  return finishDiff(merged, { bootstrap: o.bootstrap, seed: o.seed, tolerance: o.tolerance, threshold: o.threshold });
}

/**
 * Combines the tune partials of one run (already checked and ordered by `orderShards`) into the tuning
 * result, writing the table to `options.out` when given.
 */
export function mergeTunePartials(ordered: readonly OrderedPart[], options: { out?: string } = {}): TuneResult {
  const first = ordered[0]!.part;
  const layerLists = ordered.map(({ part, path }) => {
    const layers = part.data['layers'];
    if (!Array.isArray(layers)) throw new UsageError('E_PARTIAL', `${path}: data.layers must be a list`);
    return layers.map((value: unknown, i: number) => {
      const l = partialObject(value, `${path}: data.layers[${i}]`);
      return { name: String(l['name']), op: String(l['op']), depth: Number(l['depth']), moments: decodeMoments(l['moments'], `${path}: data.layers[${i}].moments`) };
    });
  });
  const tables: Array<{ layer: { name: string; op: string; depth: number }; table: TuningTable }> = layerLists[0]!.map((layer, i) => {
    let moments = layer.moments;
    for (const list of layerLists.slice(1)) moments = mergeTuningMoments(moments, list[i]!.moments);
    return { layer: { name: layer.name, op: layer.op, depth: layer.depth }, table: tuningFromMoments(moments) };
  });
  const key = first.key as { model: { file: string; sha256: string }; categories: string[]; singleLabel: boolean; readoutMap?: ReadoutMapTag };
  const result = assembleTuneResult({ folder: String(first.data['folder']), model: key.model }, tables, key.categories, { singleLabel: key.singleLabel, ...(options.out !== undefined ? { out: options.out } : {}), ...(key.readoutMap ? { readoutMap: key.readoutMap } : {}) });
  return result;
}

function concat(a: Float32Array, b: Float32Array): Float32Array {
  const out = new Float32Array(a.length + b.length);
  out.set(a);
  out.set(b, a.length);
  return out;
}

/** A readout map tag as a partial file holds it. */
function isMapTag(value: unknown): value is { name: string; sha256: string } {
  return typeof value === 'object' && value !== null && typeof (value as Record<string, unknown>)['name'] === 'string' && typeof (value as Record<string, unknown>)['sha256'] === 'string';
}
