/**
 * The snapshot manifest (`manifest.json`): the contract every reader of a snapshot relies on.
 * FORMAT_VERSION changes whenever a field changes meaning; readers refuse versions they do not know.
 */
import { existsSync, readFileSync } from 'node:fs';
import { isAbsolute, join, relative, resolve, sep } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import { replaceFile } from '../disk/atomic-file.js';
import { parseJson } from '../json.js';
import { assertRegularFile, realPathInside } from '../disk/input-file.js';

/**
 * Version of the snapshot layout written by this build.
 * 2: `stimuli.digest` is the SHA-256 over the per-stimulus SHA-256 digests of the input bytes (kept in
 * `stimuli.arrow`, column `sha256`), so shards can be merged; manifests may carry `shard`.
 */
export const FORMAT_VERSION = 2;

/** Where a shard snapshot sits in the whole stimulus listing (see `src/record/shard.ts`). */
export interface ShardInfo {
  /** K, 1-based. */
  index: number;
  /** N, the number of shards. */
  count: number;
  /** First and last global stimulus index this shard holds (inclusive). */
  stimuli: [number, number];
  /** Stimuli in the whole listing. */
  total: number;
}

/** `full`: activations and channel means; `channels`: channel means only. */
export type KeepMode = 'full' | 'channels';
/** Storage type of the `activation` column. */
export type ActivationDtype = 'float32' | 'float16';

/** One recorded tensor. */
export interface ManifestLayer {
  /** ONNX tensor name. */
  name: string;
  /** Operator type of the producing node. */
  op: string;
  /** Position among the model's recordable tensors in topological order (0-based). */
  depth: number;
  /** Weight layers (Conv, Gemm, MatMul with a weight, …) on the longest path from the input to this tensor; absent in snapshots of older builds. */
  weightDepth?: number;
  /** Per-stimulus shape, batch axis dropped. */
  shape: number[];
  /** Storage type of the `activation` column. */
  dtype: ActivationDtype;
  keep: KeepMode;
  /** Path of the Arrow file relative to the snapshot folder (or to the baseline's, see `from`). */
  file: string;
  /** `baseline`: the file is the paired baseline's own (layer upstream of the modulation, not recomputed). */
  from?: 'baseline';
  /** SHA-256 (hex) of the file, written when it is complete. */
  sha256?: string;
  /** File size in bytes. */
  bytes?: number;
  /** Rows (stimuli) in the file. */
  rows?: number;
  /** NaN/±Infinity elements the layer produced (with float16 storage also the values it overflows to ±Infinity); absent when not counted. */
  nonFinite?: number;
}

/** The whole manifest. */
export interface SnapshotManifest {
  format: number;
  tool: { name: 'sonde'; version: string };
  model: { file: string; sha256: string; input: { name: string; shape: number[] } };
  /**
   * `count`: stimuli in this snapshot (a shard's own); `digest`: SHA-256 over the per-stimulus digests in
   * index order; `listingDigest`: SHA-256 over ids and labels of the whole listing (shards share it);
   * `categories`: the categories of the whole listing; `nonFinite`: NaN/±Infinity values in the input fed
   * to the network (absent when not counted, e.g. a replay from a baseline).
   */
  stimuli: { source: string; count: number; digest: string; listingDigest: string; categories: string[]; nonFinite?: number };
  preprocessing: { size: [number, number]; mean: number[]; std: number[]; bgr: boolean } | null;
  /** The resolved modulation (vectors, seeds), or null for a baseline. */
  modulation: unknown;
  /** The model's readout (from its sidecar): output tensor, category of each unit, decision threshold. */
  readout?: { name: string; kinds: string[]; threshold?: number } | null;
  /** The baseline this snapshot pairs with, when recorded with `--from`. */
  baseline: { path: string; manifestSha256: string } | null;
  /** How the modulated values were computed. */
  run: { mode: 'full' | 'tail'; reason?: string; batch: number; threads: number; wallSeconds?: number };
  created: string;
  layers: ManifestLayer[];
  /** Set when this snapshot holds one shard of a listing (`record --shard K/N`); absent or null otherwise. */
  shard?: ShardInfo | null;
  /** True only after every file is flushed and renamed; written last. */
  complete: boolean;
  /** The error that stopped an incomplete recording, if known. */
  error?: string;
}

/**
 * Reads and validates `manifest.json` of a snapshot folder.
 * @throws UsageError when the folder or manifest is missing, not JSON, of an unknown format version,
 *   names files outside the folder, or is a link that resolves outside it (or not a regular file).
 */
export function readManifest(folder: string): SnapshotManifest {
  const path = join(folder, 'manifest.json');
  if (!existsSync(folder)) throw new UsageError('E_SNAPSHOT_MISSING', `snapshot ${folder} does not exist`);
  if (!existsSync(path)) throw new UsageError('E_SNAPSHOT_MISSING', `${folder} is not a snapshot (no manifest.json)`);
  // a link may not lead the manifest out of its folder (it would describe files it does not sit with)
  realPathInside(folder, path, `${folder}: manifest.json`);
  assertRegularFile(path, `${folder}: manifest.json`);
  let parsed: unknown;
  try {
    parsed = parseJson(readFileSync(path, 'utf8'));
  } catch (error) {
    throw new UsageError('E_MANIFEST', `${path} is not valid JSON (${(error as Error).message})`);
  }
  return validateManifest(parsed, folder);
}

/**
 * Checks the structure of a parsed manifest; see `readManifest`.
 * @param value what JSON.parse returned.
 * @param folder the snapshot folder (messages, and the root every layer file must resolve inside).
 * @returns the manifest, typed.
 * @throws UsageError naming the first field that is missing, of the wrong type or out of range, an
 *   unknown format version, a duplicate layer name or file, or a path escaping the folder.
 */
export function validateManifest(value: unknown, folder: string): SnapshotManifest {
  const where = `${folder}/manifest.json`;
  const fail = (message: string): never => {
    throw new UsageError('E_MANIFEST', `${where}: ${message}`);
  };
  if (typeof value !== 'object' || value === null || Array.isArray(value)) throw new UsageError('E_MANIFEST', `${where} is not a JSON object`);
  const m = value as Record<string, unknown>;
  if (m.format !== FORMAT_VERSION) {
    throw new UsageError('E_MANIFEST_VERSION', `${where} has format ${JSON.stringify(m.format) ?? 'missing'}; this Sonde reads format ${FORMAT_VERSION}`, {
      hint: 'record the snapshot again with this version',
    });
  }
  const model = record(m.model);
  if (!model || typeof model.sha256 !== 'string' || typeof model.file !== 'string') fail('"model" must have "file" and "sha256"');
  const stimuli = record(m.stimuli);
  if (!stimuli || !isCount(stimuli.count) || typeof stimuli.digest !== 'string') {
    fail('"stimuli" must have an integer "count" and a "digest"');
  }
  if (stimuli!.listingDigest !== undefined && typeof stimuli!.listingDigest !== 'string') fail('"stimuli.listingDigest" must be a string');
  if (stimuli!.categories !== undefined && !(Array.isArray(stimuli!.categories) && stimuli!.categories.every((c) => typeof c === 'string'))) fail('"stimuli.categories" must be a list of strings');
  if (stimuli!.nonFinite !== undefined && !isCount(stimuli!.nonFinite)) fail('"stimuli.nonFinite" must be a non-negative integer');
  const run = record(m.run);
  if (run && !(Number.isSafeInteger(run.batch) && (run.batch as number) > 0)) fail(`"run.batch" must be a positive integer, got ${JSON.stringify(run.batch)}`);
  const baseline = m.baseline;
  if (baseline !== undefined && baseline !== null) {
    const b = record(baseline);
    if (!b || typeof b.path !== 'string' || b.path === '' || b.path.includes('\0') || typeof b.manifestSha256 !== 'string') fail('"baseline" must be null or have a "path" and a "manifestSha256"');
  }
  if (m.shard !== undefined && m.shard !== null) validateShard(m.shard, stimuli!.count as number, fail);
  if (!Array.isArray(m.layers)) fail('"layers" must be an array');
  const names = new Set<string>();
  const files = new Set<string>();
  (m.layers as unknown[]).forEach((layer: unknown, i: number) => {
    const l = record(layer);
    if (!l || typeof l.name !== 'string' || typeof l.file !== 'string' || !Array.isArray(l.shape) || !l.shape.every((d) => Number.isSafeInteger(d) && (d as number) >= 1)) {
      fail(`layers[${i}] must have "name", "file" and a "shape" of positive integers`);
    }
    const entry = l!;
    const shape = entry.shape as number[];
    if (shape.length > 8 || shape.reduce((a, b) => a * b, 1) > 2 ** 31 - 1) fail(`layers[${i}].shape [${shape.join(', ')}] is absurdly large`);
    if (entry.keep !== 'full' && entry.keep !== 'channels') fail(`layers[${i}].keep must be "full" or "channels"`);
    if (entry.dtype !== 'float32' && entry.dtype !== 'float16') fail(`layers[${i}].dtype must be "float32" or "float16"`);
    if (entry.from !== undefined && entry.from !== 'baseline') fail(`layers[${i}].from must be "baseline" when present`);
    if (entry.from === 'baseline' && (m.baseline === null || m.baseline === undefined)) fail(`layers[${i}] comes from a baseline but "baseline" is null`);
    for (const key of ['rows', 'bytes', 'nonFinite', 'weightDepth'] as const) {
      if (entry[key] !== undefined && !isCount(entry[key])) fail(`layers[${i}].${key} must be a non-negative integer`);
    }
    if (entry.sha256 !== undefined && !(typeof entry.sha256 === 'string' && /^[0-9a-f]{64}$/.test(entry.sha256))) fail(`layers[${i}].sha256 must be 64 hex digits`);
    if (names.has(entry.name as string)) fail(`layers[${i}].name ${JSON.stringify(entry.name)} appears twice`);
    names.add(entry.name as string);
    if (entry.from !== 'baseline') {
      if (files.has(entry.file as string)) fail(`layers[${i}].file ${JSON.stringify(entry.file)} is used by two layers`);
      files.add(entry.file as string);
      assertInside(folder, entry.file as string, `${where}: layers[${i}].file`);
    } else {
      // resolved against the baseline folder by the reader; still never absolute or climbing out of it
      if (isAbsolute(entry.file as string) || (entry.file as string).split(/[\\/]/).includes('..')) {
        throw new UsageError('E_MANIFEST_PATH', `${where}: layers[${i}].file "${String(entry.file)}" must be a plain path inside the baseline folder`);
      }
    }
  });
  if (typeof m.complete !== 'boolean') fail('"complete" must be true or false');
  return m as unknown as SnapshotManifest;
}

function record(value: unknown): Record<string, unknown> | null {
  return typeof value === 'object' && value !== null && !Array.isArray(value) ? (value as Record<string, unknown>) : null;
}

function isCount(value: unknown): boolean {
  return Number.isSafeInteger(value) && (value as number) >= 0;
}

function validateShard(value: unknown, count: number, fail: (message: string) => never): void {
  const s = record(value);
  const range = s?.stimuli;
  if (!s || !Number.isSafeInteger(s.index) || !Number.isSafeInteger(s.count) || !isCount(s.total) || !Array.isArray(range) || range.length !== 2 || !range.every((x) => isCount(x))) {
    fail('"shard" must be null or { index, count, stimuli: [first, last], total } with integers');
  }
  const [first, last] = range as [number, number];
  const { index, count: shards, total } = s as { index: number; count: number; total: number };
  if (index < 1 || index > shards) fail(`"shard.index" ${index} is outside 1..${shards}`);
  if (first > last || last >= total) fail(`"shard.stimuli" [${first}, ${last}] is not a range inside 0..${total - 1}`);
  if (last - first + 1 !== count) fail(`"shard.stimuli" [${first}, ${last}] holds ${last - first + 1} stimuli but "stimuli.count" is ${count}`);
}

/**
 * Resolves `file` against `folder` and refuses paths that escape it (absolute paths, `..`).
 * @throws UsageError naming `what` and the path.
 */
export function assertInside(folder: string, file: string, what: string): string {
  if (isAbsolute(file) || file.includes('\0')) throw new UsageError('E_MANIFEST_PATH', `${what} "${file}" is absolute; snapshot paths must be relative`);
  const root = resolve(folder);
  const target = resolve(root, file);
  const rel = relative(root, target);
  // '..' as a whole segment climbs out; names like '...' or '..a' are ordinary names inside
  if (rel === '' || rel === '..' || rel.startsWith(`..${sep}`) || isAbsolute(rel)) {
    throw new UsageError('E_MANIFEST_PATH', `${what} "${file}" points outside the snapshot folder`);
  }
  return target;
}

/** Throws unless the manifest says the recording finished. */
export function assertComplete(manifest: SnapshotManifest, folder: string): void {
  if (!manifest.complete) {
    throw new RuntimeFailure('E_SNAPSHOT_INCOMPLETE', `snapshot ${folder} is incomplete${manifest.error ? ` (${manifest.error})` : ' (the recording did not finish)'}`, {
      hint: 'record it again',
    });
  }
}

/**
 * Writes `manifest.json` atomically (temporary file, fsync, rename), so a reader sees either the old or
 * the new manifest, never a torn one.
 */
export function writeManifest(folder: string, manifest: SnapshotManifest): void {
  replaceFile(join(folder, 'manifest.json'), `${JSON.stringify(manifest, null, 2)}\n`);
}
