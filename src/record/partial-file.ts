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
 * (JSON numbers cannot) and every bit of every value. Parts must have equal `key`s. Version 2 adds
 * `sha256`, the SHA-256 of the file's JSON text without that field (the object serialised by
 * `JSON.stringify` in its written key order): `merge` recomputes it, so a flipped character anywhere —
 * a base64 digit of a score — is refused instead of merged into other numbers.
 */
import { createHash } from 'node:crypto';
import { z } from 'zod';
import { SondeError, UsageError } from '../errors.js';
import { replaceFile } from '../disk/atomic-file.js';
import { parseJson, schemaProblem } from '../json.js';
import { INPUT_LIMITS, readInputText } from '../disk/input-file.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { shardRange, type ShardSpec } from './shard.js';

/** Tag of a partial-statistics file. */
export const PARTIAL_KIND = 'sonde.partial';
/** Version of the partial-statistics layout. */
export const PARTIAL_VERSION = 2;

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


const count = z.number().int().nonnegative().max(Number.MAX_SAFE_INTEGER);

/** Schema of the envelope; `data` is checked by each kind's merge, field by field. */
const partialSchema = z.looseObject({
  kind: z.literal(PARTIAL_KIND),
  version: z.literal(PARTIAL_VERSION),
  of: z.enum(['diff', 'tune', 'sense']),
  shard: z.looseObject({ index: count.min(1), count: count.min(1), stimuli: z.tuple([count, count]), total: count }),
  key: z.record(z.string(), z.unknown()),
  data: z.record(z.string(), z.unknown()),
  sha256: z.string().regex(/^[0-9a-f]{64}$/, 'must be 64 lower-case hex digits'),
});

/** SHA-256 of a partial's JSON text without its `sha256` field. */
function partialDigest(partial: Record<string, unknown>): string {
  const { sha256: _digest, ...rest } = partial;
  return createHash('sha256').update(JSON.stringify(rest)).digest('hex');
}

/**
 * Writes a partial file atomically (temporary name, fsync, rename), with its digest.
 * @throws RuntimeFailure when it cannot be written.
 */
export function writePartial(path: string, partial: PartialFile): { bytes: number } {
  const body = partial as unknown as Record<string, unknown>;
  const text = `${JSON.stringify({ ...body, sha256: partialDigest(body) })}\n`;
  replaceFile(path, text);
  return { bytes: Buffer.byteLength(text) };
}

/**
 * Reads and checks a partial file: a regular file within the size limit, valid JSON, the envelope's
 * schema (field paths named), and the digest over its content.
 * @throws UsageError when the file is missing, not JSON, not a partial file, of another version, has a
 *   field of the wrong type, or its content does not match its digest (damaged after it was written).
 */
export function readPartial(path: string): PartialFile {
  let text: string;
  try {
    text = readInputText(path, `partial file ${path}`, INPUT_LIMITS.partial);
  } catch (error) {
    if (error instanceof SondeError) throw error;
    throw new UsageError('E_PARTIAL', `partial file ${path} cannot be read (${(error as NodeJS.ErrnoException).code ?? (error as Error).message})`);
  }
  let value: unknown;
  try {
    value = parseJson(text);
  } catch (error) {
    throw new UsageError('E_PARTIAL', `${path} is not valid JSON (${(error as Error).message})`, { hint: 'pass files written by diff/tune --partial' });
  }
  const v = typeof value === 'object' && value !== null && !Array.isArray(value) ? (value as Record<string, unknown>) : {};
  if (v['kind'] !== PARTIAL_KIND) throw new UsageError('E_PARTIAL', `${path} is not a Sonde partial-statistics file`, { hint: 'pass files written by diff/tune --partial, or snapshot folders' });
  if (v['version'] !== PARTIAL_VERSION) {
    throw new UsageError('E_PARTIAL', `${path} has partial-statistics version ${JSON.stringify(v['version'])}; this Sonde reads ${PARTIAL_VERSION}`, { hint: 'write the parts again with this version (diff/tune/sense --partial)' });
  }
  const problem = schemaProblem(partialSchema, v);
  if (problem) throw new UsageError('E_PARTIAL', `${path}: ${problem}`, { hint: 'pass files written by diff/tune/sense --partial' });
  if (partialDigest(v) !== v['sha256']) {
    throw new UsageError('E_PARTIAL_INTEGRITY', `${path}: its content does not match its sha256 (the file changed or was damaged after it was written)`, { hint: 'write this part again with the same diff/tune/sense --partial command' });
  }
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
