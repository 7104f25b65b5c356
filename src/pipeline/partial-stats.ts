/**
 * Partial statistics: the map-reduce form of `diff` and `tune` for very large recordings. Each of N
 * processes reads one shard of the stimuli (`--shard K/N`, the split of src/pipeline/shard.ts) of the
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
 * File layout (our own): `{ kind: "sonde.partial", version: 1, of: "diff" | "tune", shard: {index, count,
 * stimuli: [first, last], total}, key: {…}, data: {…} }`; typed arrays are stored as
 * `{ dtype: "f64" | "f32" | "i32", base64 }` of their little-endian bytes, which keeps NaN and ±Infinity
 * (JSON numbers cannot) and every bit of every value. Parts must have equal `key`s.
 */
import { readFileSync } from 'node:fs';
import { LayerDiffAccumulator, type LayerDiffState } from '../analysis/layer-diff.js';
import { accumulateTuning, mergeTuningMoments, tuningFromMoments, type TuningMoments, type TuningTable } from '../analysis/tuning.js';
import { RuntimeFailure, UsageError } from '../errors.js';
import { replaceFile } from '../snapshot/atomic-file.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { collectDiff, finishDiff, type CollectedLayer, type DiffCollection, type DiffOptions, type DiffReport } from './diff-snapshots.js';
import { shardRange, type ShardSpec } from './shard.js';
import { assembleTuneResult, planTuning, type TuneOptions, type TuneResult } from './tune.js';
import { DEFAULT_WARN_RATIO, errorCheck, senseSites, sensitivityFromSums, type SenseMethod, type SenseOptions, type SenseResult, type SiteSensitivity } from './sense.js';
import { writeSensitivityTable } from '../snapshot/tables.js';
import { parseJson } from '../json.js';

/** Tag of a partial-statistics file. */
export const PARTIAL_KIND = 'sonde.partial';
/** Version of the partial-statistics layout. */
export const PARTIAL_VERSION = 1;

/** A typed array as stored in a partial file. */
export interface EncodedArray {
  dtype: 'f64' | 'f32' | 'i32';
  base64: string;
}

/** Where a partial sits among the shards. */
export interface PartialShard {
  index: number;
  count: number;
  /** First and last global stimulus index (inclusive). */
  stimuli: [number, number];
  /** Stimuli of the whole snapshot. */
  total: number;
}

/** A partial-statistics file. */
export interface PartialFile {
  kind: typeof PARTIAL_KIND;
  version: typeof PARTIAL_VERSION;
  of: 'diff' | 'tune' | 'sense';
  shard: PartialShard;
  /** Identity of the whole run (snapshots, options); equal in every part. */
  key: Record<string, unknown>;
  data: Record<string, unknown>;
}

/** Encodes a typed array losslessly. */
export function encodeArray(values: Float64Array | Float32Array | Int32Array): EncodedArray {
  const dtype = values instanceof Float64Array ? 'f64' : values instanceof Float32Array ? 'f32' : 'i32';
  return { dtype, base64: Buffer.from(values.buffer, values.byteOffset, values.byteLength).toString('base64') };
}

/**
 * Decodes `encodeArray`'s form.
 * @throws UsageError naming `what` when the value is not an encoded array of the expected type.
 */
export function decodeArray(value: unknown, dtype: 'f64', what: string): Float64Array;
export function decodeArray(value: unknown, dtype: 'f32', what: string): Float32Array;
export function decodeArray(value: unknown, dtype: 'i32', what: string): Int32Array;
export function decodeArray(value: unknown, dtype: EncodedArray['dtype'], what: string): Float64Array | Float32Array | Int32Array {
  const v = value as Partial<EncodedArray> | null;
  if (typeof v !== 'object' || v === null || v.dtype !== dtype || typeof v.base64 !== 'string' || !/^[A-Za-z0-9+/]*={0,2}$/.test(v.base64)) {
    throw new UsageError('E_PARTIAL', `${what} must be an encoded ${dtype} array`);
  }
  const bytes = Buffer.from(v.base64, 'base64');
  const size = dtype === 'f64' ? 8 : 4;
  if (bytes.length % size !== 0) throw new UsageError('E_PARTIAL', `${what} holds ${bytes.length} bytes, not a whole number of ${dtype} values`);
  const copy = new Uint8Array(bytes.length);
  copy.set(bytes);
  return dtype === 'f64' ? new Float64Array(copy.buffer) : dtype === 'f32' ? new Float32Array(copy.buffer) : new Int32Array(copy.buffer);
}

function shardOf(snapshot: Snapshot, shard: ShardSpec): { range: [number, number]; info: PartialShard } {
  const count = snapshot.manifest.stimuli.count;
  const { start, end } = shardRange(shard.index, shard.count, count);
  const first = snapshot.firstIndex;
  return { range: [first + start, first + end], info: { index: shard.index, count: shard.count, stimuli: [first + start, first + end - 1], total: count } };
}

function snapshotKey(snapshot: Snapshot): Record<string, unknown> {
  const m = snapshot.manifest;
  return { model: m.model.sha256, digest: m.stimuli.digest, count: m.stimuli.count, first: snapshot.firstIndex, layers: m.layers.map((l) => l.name) };
}

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
    options: { bootstrap: options.bootstrap ?? 1000, seed: options.seed ?? 0, tolerance: options.tolerance ?? 0.01, threshold: options.threshold ?? 'auto', task: options.task ?? null, target: options.target ?? null },
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
      baseDtype: l.baseDtype,
      modDtype: l.modDtype,
      unchanged: l.unchanged,
      accumulator: encodeState(l.accumulator.exportState()),
      floor: l.floor ? encodeState(l.floor.exportState()) : null,
      tuning: l.tuning ? encodeArray(l.tuning) : null,
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
  const v = record(value, what);
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

function record(value: unknown, what: string): Record<string, unknown> {
  if (typeof value !== 'object' || value === null || Array.isArray(value)) throw new UsageError('E_PARTIAL', `${what} must be an object`);
  return value as Record<string, unknown>;
}

function decodeCollection(part: PartialFile, where: string): DiffCollection {
  const d = part.data;
  const layers = d['layers'];
  if (!Array.isArray(layers)) throw new UsageError('E_PARTIAL', `${where}: data.layers must be a list`);
  const collected: CollectedLayer[] = layers.map((value: unknown, i: number) => {
    const l = record(value, `${where}: data.layers[${i}]`);
    const at = `${where}: data.layers[${i}]`;
    if (typeof l['name'] !== 'string' || typeof l['op'] !== 'string' || typeof l['depth'] !== 'number') throw new UsageError('E_PARTIAL', `${at} lacks name, op or depth`);
    return {
      name: l['name'],
      op: l['op'],
      depth: l['depth'],
      baseDtype: String(l['baseDtype']),
      modDtype: String(l['modDtype']),
      unchanged: l['unchanged'] === true,
      accumulator: LayerDiffAccumulator.fromState(decodeState(l['accumulator'], `${at}.accumulator`)),
      floor: l['floor'] === null ? null : LayerDiffAccumulator.fromState(decodeState(l['floor'], `${at}.floor`)),
      tuning: l['tuning'] === null ? null : decodeArray(l['tuning'], 'f64', `${at}.tuning`),
    };
  });
  const taskValue = d['task'];
  let task: DiffCollection['task'] = null;
  if (taskValue !== null) {
    const t = record(taskValue, `${where}: data.task`);
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
    };
  }
  const base = record(d['base'], `${where}: data.base`);
  const mod = record(d['mod'], `${where}: data.mod`);
  return {
    base: { folder: String(base['folder']) },
    mod: { folder: String(mod['folder']), modulation: mod['modulation'] ?? null },
    floor: d['floor'] === null ? null : { folder: String(record(d['floor'], `${where}: data.floor`)['folder']) },
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
  const { categories, layers } = planTuning(snapshot, options, folder);
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
  const key = { snapshot: snapshotKey(snapshot), model: snapshot.manifest.model, categories, singleLabel: options.singleLabel ?? false, layers: layers.map((l) => l.name) };
  return { kind: PARTIAL_KIND, version: PARTIAL_VERSION, of: 'tune', shard: info, key, data: { folder: snapshot.folder, layers: out } };
}

function decodeMoments(value: unknown, what: string): TuningMoments {
  const m = record(value, what);
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

// ---------------------------------------------------------------------------------------------------
// files and merging

/**
 * Writes a partial file atomically (temporary name, fsync, rename).
 * @throws RuntimeFailure when it cannot be written.
 */
export function writePartial(path: string, partial: PartialFile): { bytes: number } {
  const text = `${JSON.stringify(partial)}\n`;
  replaceFile(path, text);
  return { bytes: Buffer.byteLength(text) };
}

/**
 * Reads and checks the envelope of a partial file.
 * @throws UsageError when the file is missing, not JSON, not a partial file, or of another version.
 */
export function readPartial(path: string): PartialFile {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (error) {
    throw new UsageError('E_PARTIAL', `partial file ${path} cannot be read (${(error as NodeJS.ErrnoException).code ?? (error as Error).message})`);
  }
  let value: unknown;
  try {
    value = parseJson(text);
  } catch (error) {
    throw new UsageError('E_PARTIAL', `${path} is not valid JSON (${(error as Error).message})`, { hint: 'pass files written by diff/tune --partial' });
  }
  const v = typeof value === 'object' && value !== null ? (value as Record<string, unknown>) : {};
  if (v['kind'] !== PARTIAL_KIND) throw new UsageError('E_PARTIAL', `${path} is not a Sonde partial-statistics file`, { hint: 'pass files written by diff/tune --partial, or snapshot folders' });
  if (v['version'] !== PARTIAL_VERSION) throw new UsageError('E_PARTIAL', `${path} has partial-statistics version ${JSON.stringify(v['version'])}; this Sonde reads ${PARTIAL_VERSION}`);
  if (v['of'] !== 'diff' && v['of'] !== 'tune' && v['of'] !== 'sense') throw new UsageError('E_PARTIAL', `${path}: "of" must be "diff", "tune" or "sense", got ${JSON.stringify(v['of'])}`);
  const s = v['shard'] as Record<string, unknown> | undefined;
  const int = (x: unknown) => Number.isSafeInteger(x) && (x as number) >= 0;
  if (!s || !int(s['index']) || !int(s['count']) || !int(s['total']) || !Array.isArray(s['stimuli']) || s['stimuli'].length !== 2 || !s['stimuli'].every(int)) {
    throw new UsageError('E_PARTIAL', `${path}: "shard" must be {index, count, stimuli: [first, last], total}`);
  }
  if (typeof v['key'] !== 'object' || v['key'] === null || typeof v['data'] !== 'object' || v['data'] === null) throw new UsageError('E_PARTIAL', `${path} lacks "key" or "data"`);
  return value as PartialFile;
}

/** What `mergePartials` gives. */
export type MergedPartials = { of: 'diff'; report: DiffReport } | { of: 'tune'; result: TuneResult } | { of: 'sense'; result: SenseResult };

/**
 * Checks that partial files belong together and combines them into the full result.
 * @param parts the files' contents; `paths` name them in messages.
 * @param options `out`: for tune, where the tuning table goes.
 * @returns the diff report, or the tuning result (and table file).
 * @throws UsageError when they are of different kinds, runs or shard counts, a shard is missing or given
 *   twice, or a shard's range is not its place in the split.
 */
export async function mergePartials(parts: readonly PartialFile[], paths: readonly string[], options: { out?: string } = {}): Promise<MergedPartials> {
  if (parts.length === 0) throw new UsageError('E_MERGE', 'merge needs at least one part');
  const first = parts[0]!;
  const keyText = JSON.stringify(first.key);
  parts.forEach((p, i) => {
    if (p.of !== first.of) throw new UsageError('E_PAIRING', `${paths[i]} holds partial ${p.of} statistics, ${paths[0]} partial ${first.of}`);
    if (JSON.stringify(p.key) !== keyText) throw new UsageError('E_PAIRING', `${paths[i]} comes from another run than ${paths[0]} (other snapshots, options or layers)`, { hint: 'merge only the shards of one run' });
    if (p.shard.count !== first.shard.count || p.shard.total !== first.shard.total) throw new UsageError('E_PAIRING', `${paths[i]} is shard ${p.shard.index}/${p.shard.count} of ${p.shard.total} stimuli, ${paths[0]} of ${first.shard.count} shards and ${first.shard.total} stimuli`);
  });
  const n = first.shard.count;
  const byIndex = new Map<number, number>();
  parts.forEach((p, i) => {
    const earlier = byIndex.get(p.shard.index);
    if (earlier !== undefined) throw new UsageError('E_MERGE', `shard ${p.shard.index}/${n} is given twice (${paths[earlier]} and ${paths[i]})`);
    byIndex.set(p.shard.index, i);
  });
  const missing: number[] = [];
  for (let k = 1; k <= n; k++) if (!byIndex.has(k)) missing.push(k);
  if (missing.length > 0) throw new UsageError('E_MERGE', `shard${missing.length > 1 ? 's' : ''} ${missing.map((k) => `${k}/${n}`).join(', ')} missing (got ${parts.length} of ${n})`);
  const ordered: Array<{ part: PartialFile; path: string }> = [];
  for (let k = 1; k <= n; k++) {
    const i = byIndex.get(k)!;
    const part = parts[i]!;
    const { start, end } = shardRange(k, n, part.shard.total);
    const offset = part.shard.stimuli[0] - start;
    if (part.shard.stimuli[1] - part.shard.stimuli[0] !== end - 1 - start || (ordered.length > 0 && offset !== ordered[0]!.part.shard.stimuli[0])) {
      throw new UsageError('E_MERGE', `${paths[i]}: shard ${k}/${n} holds stimuli ${part.shard.stimuli[0]}..${part.shard.stimuli[1]}, not its place in the split`);
    }
    ordered.push({ part, path: paths[i]! });
  }
  if (first.of === 'diff') {
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
    const o = record(first.key['options'], 'key.options') as { bootstrap: number; seed: number; tolerance: number; threshold: number | 'best' | 'auto' };
    return { of: 'diff', report: await finishDiff(merged, { bootstrap: o.bootstrap, seed: o.seed, tolerance: o.tolerance, threshold: o.threshold }) };
  }
  if (first.of === 'sense') return { of: 'sense', result: mergeSense(ordered, options) };
  const layerLists = ordered.map(({ part, path }) => {
    const layers = part.data['layers'];
    if (!Array.isArray(layers)) throw new UsageError('E_PARTIAL', `${path}: data.layers must be a list`);
    return layers.map((value: unknown, i: number) => {
      const l = record(value, `${path}: data.layers[${i}]`);
      return { name: String(l['name']), op: String(l['op']), depth: Number(l['depth']), moments: decodeMoments(l['moments'], `${path}: data.layers[${i}].moments`) };
    });
  });
  const tables: Array<{ layer: { name: string; op: string; depth: number }; table: TuningTable }> = layerLists[0]!.map((layer, i) => {
    let moments = layer.moments;
    for (const list of layerLists.slice(1)) moments = mergeTuningMoments(moments, list[i]!.moments);
    return { layer: { name: layer.name, op: layer.op, depth: layer.depth }, table: tuningFromMoments(moments) };
  });
  const key = first.key as { model: { file: string; sha256: string }; categories: string[]; singleLabel: boolean };
  const result = assembleTuneResult({ folder: String(first.data['folder']), model: key.model }, tables, key.categories, { singleLabel: key.singleLabel, ...(options.out !== undefined ? { out: options.out } : {}) });
  return { of: 'tune', result };
}

function concat(a: Float32Array, b: Float32Array): Float32Array {
  const out = new Float32Array(a.length + b.length);
  out.set(a);
  out.set(b, a.length);
  return out;
}

// ---------------------------------------------------------------------------------------------------
// sense

/**
 * Measures shard `shard` of a sensitivity run: per site the readout sums of the shard's stimuli.
 * @throws UsageError as `senseSites` does.
 */
export async function sensePartial(options: SenseOptions, shard: ShardSpec): Promise<PartialFile> {
  const { out: _out, ...rest } = options;
  const result = await senseSites({ ...rest, shard });
  const [start, end] = result.range;
  const info: PartialShard = { index: shard.index, count: shard.count, stimuli: [start, end - 1], total: result.stimuli };
  const key = {
    metadata: result.metadata,
    readout: result.readout,
    source: result.source,
    warnRatio: options.warnRatio ?? DEFAULT_WARN_RATIO,
    method: options.method ?? 'richardson',
    sites: result.sites.map((b) => [b.layer, b.kind, b.step, b.channels]),
  };
  const sites = result.sites.map((block) => {
    const { sensitivity: _s, fdError: _e, extrapolationShift: _x, sums, count, ...fields } = block;
    return { ...fields, count: encodeArray(count), sums: { variants: sums!.variants, perturbed: encodeArray(sums!.perturbed), identity: encodeArray(sums!.identity), counts: encodeArray(sums!.counts) } };
  });
  return { kind: PARTIAL_KIND, version: PARTIAL_VERSION, of: 'sense', shard: info, key, data: { sites } };
}

/** Adds up the shards' sums per site and derives sensitivities, errors, costs and warnings. */
function mergeSense(ordered: ReadonlyArray<{ part: PartialFile; path: string }>, options: { out?: string }): SenseResult {
  const key = ordered[0]!.part.key as { metadata: Record<string, string>; readout: SenseResult['readout']; source: SenseResult['source']; warnRatio: number; method?: SenseMethod };
  const perPart = ordered.map(({ part, path }) => {
    const sites = part.data['sites'];
    if (!Array.isArray(sites)) throw new UsageError('E_PARTIAL', `${path}: data.sites must be a list`);
    return sites.map((value: unknown, i: number) => {
      const at = `${path}: data.sites[${i}]`;
      const b = record(value, at);
      const sums = record(b['sums'], `${at}.sums`);
      return {
        fields: b,
        variants: Number(sums['variants']),
        perturbed: decodeArray(sums['perturbed'], 'f64', `${at}.sums.perturbed`),
        identity: decodeArray(sums['identity'], 'f64', `${at}.sums.identity`),
        counts: decodeArray(sums['counts'], 'i32', `${at}.sums.counts`),
      };
    });
  });
  const blocks: SiteSensitivity[] = perPart[0]!.map((firstSite, i) => {
    const f = firstSite.fields;
    const C = Number(f['channels']);
    const categories = (f['categories'] as unknown[]).map(String);
    const K = categories.length;
    const perturbed = new Float64Array(firstSite.perturbed.length);
    const identity = new Float64Array(firstSite.identity.length);
    const counts = new Int32Array(firstSite.counts.length);
    const total = { runs: 0, rows: 0, skippedRows: 0, prefixRuns: 0, prefixStimuli: 0, tailSeconds: 0, prefixSeconds: 0, wallSeconds: 0, stimuliUsed: 0 };
    for (const sites of perPart) {
      const site = sites[i]!;
      if (site.perturbed.length !== perturbed.length || site.counts.length !== counts.length) throw new UsageError('E_PAIRING', `site ${String(f['layer'])}: the shards' sums have different sizes`);
      for (let j = 0; j < perturbed.length; j++) perturbed[j] += site.perturbed[j]!;
      for (let j = 0; j < identity.length; j++) identity[j] += site.identity[j]!;
      for (let j = 0; j < counts.length; j++) counts[j] += site.counts[j]!;
      for (const name of Object.keys(total) as Array<keyof typeof total>) total[name] += Number(site.fields[name]);
    }
    const step = Number(f['step']);
    const { sensitivity, fdError, extrapolationShift } = sensitivityFromSums({ variants: firstSite.variants, perturbed, identity, counts }, C, K, step);
    const share = Number(f['downstreamShare']);
    const block: SiteSensitivity = {
      layer: String(f['layer']),
      depth: Number(f['depth']),
      op: String(f['op']),
      channels: C,
      categories,
      sensitivity,
      fdError,
      kind: f['kind'] === 'offset' ? 'offset' : 'gain',
      step,
      method: extrapolationShift ? 'richardson' : 'secant', // 4 step variants are Richardson's, 2 the secant's
      extrapolationShift,
      count: counts,
      worstErrorRatio: 0,
      ...total,
      downstreamShare: share,
      forwardEquivalentsPerChannel: (total.rows * share + total.prefixStimuli) / (C * total.stimuliUsed),
    };
    const check = errorCheck(block, key.warnRatio);
    block.worstErrorRatio = check.worst;
    if (check.warning) block.warning = check.warning;
    return block;
  });
  const total = ordered[0]!.part.shard.total;
  const result: SenseResult = { sites: blocks, readout: key.readout, source: key.source, warnings: blocks.flatMap((b) => (b.warning ? [b.warning] : [])), stimuli: total, range: [0, total], metadata: key.metadata };
  if (options.out !== undefined) result.file = { path: options.out, ...writeSensitivityTable(options.out, blocks, key.metadata) };
  return result;
}
