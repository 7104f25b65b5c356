/**
 * The partial-statistics file: what one shard of a `diff`, `tune` or `sense` run writes
 * (`--partial FILE.json`) and `sonde merge` reads back. The merging itself lives beside each measurement
 * (src/compare/partials.ts for diff and tune, src/replay/sense-partial.ts for sense); this file holds the
 * envelope, the lossless array encoding, and the check that a set of parts is one run's shards, each
 * once and in its place.
 *
 * File layout (our own): `{ kind: "sonde.partial", version: 1, of: "diff" | "tune" | "sense", shard:
 * {index, count, stimuli: [first, last], total}, key: {…}, data: {…} }`; typed arrays are stored as
 * `{ dtype: "f64" | "f32" | "i32", base64 }` of their little-endian bytes, which keeps NaN and ±Infinity
 * (JSON numbers cannot) and every bit of every value. Parts must have equal `key`s.
 */
import { readFileSync } from 'node:fs';
import { UsageError } from '../errors.js';
import { replaceFile } from '../disk/atomic-file.js';
import { parseJson } from '../json.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { shardRange, type ShardSpec } from './shard.js';

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


/**
 * The stimulus range a shard of `snapshot` covers (global indices, end exclusive) and its place among
 * the shards as a partial file records it.
 */
export function shardOf(snapshot: Snapshot, shard: ShardSpec): { range: [number, number]; info: PartialShard } {
  const count = snapshot.manifest.stimuli.count;
  const { start, end } = shardRange(shard.index, shard.count, count);
  const first = snapshot.firstIndex;
  return { range: [first + start, first + end], info: { index: shard.index, count: shard.count, stimuli: [first + start, first + end - 1], total: count } };
}


/** What identifies a snapshot in a partial's key: model, stimuli and layers. */
export function snapshotKey(snapshot: Snapshot): Record<string, unknown> {
  const m = snapshot.manifest;
  return { model: m.model.sha256, digest: m.stimuli.digest, count: m.stimuli.count, first: snapshot.firstIndex, layers: m.layers.map((l) => l.name) };
}

/**
 * An object-valued field of a partial file.
 * @throws UsageError naming `what` when the value is not a plain object.
 */
export function partialObject(value: unknown, what: string): Record<string, unknown> {
  if (typeof value !== 'object' || value === null || Array.isArray(value)) throw new UsageError('E_PARTIAL', `${what} must be an object`);
  return value as Record<string, unknown>;
}


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
/** A part in shard order, with the path that names it in messages. */
export interface OrderedPart {
  part: PartialFile;
  path: string;
}

/**
 * Checks that partial files belong together — one kind, one run (equal keys), one split — and that every
 * shard is there once and holds its place in the split, and puts them in shard order.
 * @param parts the files' contents; `paths` name them in messages.
 * @returns the parts ordered by shard index.
 * @throws UsageError when they are of different kinds, runs or shard counts, a shard is missing or given
 *   twice, or a shard's range is not its place in the split.
 */
export function orderShards(parts: readonly PartialFile[], paths: readonly string[]): OrderedPart[] {
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
  const ordered: OrderedPart[] = [];
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
  return ordered;
}
