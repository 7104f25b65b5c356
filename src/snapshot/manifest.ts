/**
 * The snapshot manifest (`manifest.json`): the contract every reader of a snapshot relies on.
 * FORMAT_VERSION changes whenever a field changes meaning; readers refuse versions they do not know.
 */
import { existsSync } from 'node:fs';
import { isAbsolute, join, relative, resolve, sep } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import { replaceFile } from '../disk/atomic-file.js';
import { parseJson, schemaProblem } from '../json.js';
import { manifestSchema } from './schema.js';
import { layoutFromShape, type TensorLayout } from '../graph/layout.js';
import { assertRegularFile, INPUT_LIMITS, readInputText, realPathInside } from '../disk/input-file.js';

/**
 * Version of the snapshot layout written by this build.
 * 2: `stimuli.digest` is the SHA-256 over the per-stimulus SHA-256 digests of the input bytes (kept in
 * `stimuli.arrow`, column `sha256`), so shards can be merged; manifests may carry `shard`.
 * 3: layer files may be compressed (Arrow IPC buffer compression, LZ4 frame or ZSTD; a layer's
 * `compression`), and a full layer has a channel-means file of its own (a layer's `means`: file,
 * SHA-256, size), so channel means are read and verified without the activation bytes.
 */
export const FORMAT_VERSION = 3;

/**
 * Formats this build reads. A format-2 snapshot is read as it is (no layer has `means` or
 * `compression`: channel means come from the layer file, verified whole).
 */
export const READABLE_FORMATS: readonly number[] = [2, 3];

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
  /** How the layer file's record batches are compressed (Arrow IPC buffer compression); absent: not compressed (format 3). */
  compression?: 'lz4' | 'zstd';
  /**
   * The channel-means file of a full layer (format 3): `file` relative to the same folder as `file`,
   * holding the layer's `index` and `channel_mean` columns, with its SHA-256 and size.
   */
  means?: { file: string; sha256: string; bytes: number };
  /**
   * Feature axis and positions of `shape` (src/graph/layout.ts): channel means and every per-channel
   * table run along it. Absent in snapshots of older builds, which mean features on axis 0
   * (`layoutFromShape`); use `layerLayout(entry)`.
   */
  layout?: TensorLayout;
}

/** The layout of a manifest layer: its recorded one, or the rank rule of snapshots written before layouts. */
export function layerLayout(entry: Pick<ManifestLayer, 'shape' | 'layout'>): TensorLayout {
  return entry.layout ?? layoutFromShape(entry.shape);
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
  stimuli: {
    source: string;
    count: number;
    digest: string;
    listingDigest: string;
    categories: string[];
    nonFinite?: number;
    /** SHA-256 and size of `stimuli.arrow` (ids, labels, digests), checked by every reader; absent in snapshots of older builds. */
    table?: { sha256: string; bytes: number };
  };
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
  const text = readInputText(path, `${folder}: manifest.json`, INPUT_LIMITS.json);
  try {
    parsed = parseJson(text);
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
  if (!READABLE_FORMATS.includes(m.format as number)) {
    const newer = typeof m.format === 'number' && m.format > FORMAT_VERSION;
    throw new UsageError('E_MANIFEST_VERSION', `${where} has format ${JSON.stringify(m.format) ?? 'missing'}; this Sonde reads formats ${READABLE_FORMATS.join(' and ')}`, {
      hint: newer ? 'read it with the newer Sonde that wrote it, or convert it there with `sonde export`' : 'record the snapshot again with this version',
    });
  }
  const problem = schemaProblem(manifestSchema, m);
  if (problem) fail(problem);
  const stimuli = m.stimuli as SnapshotManifest['stimuli'];
  if (m.shard !== undefined && m.shard !== null) validateShard(m.shard, stimuli.count, fail);
  if (!Array.isArray(m.layers)) fail('"layers" must be an array');
  const names = new Set<string>();
  const files = new Set<string>();
  (m.layers as unknown[]).forEach((layer: unknown, i: number) => {
    const entry = layer as Record<string, unknown>;
    const shape = entry.shape as number[];
    if (shape.reduce((a, b) => a * b, 1) > 2 ** 31 - 1) fail(`layers[${i}].shape [${shape.join(', ')}] is absurdly large`);
    if (entry.from === 'baseline' && (m.baseline === null || m.baseline === undefined)) fail(`layers[${i}] comes from a baseline but "baseline" is null`);
    const layoutProblem = entry.layout ? layoutMisfit(shape, entry.layout as TensorLayout) : null;
    if (layoutProblem) fail(`layers[${i}].layout ${layoutProblem}`);
    if (names.has(entry.name as string)) fail(`layers[${i}].name ${JSON.stringify(entry.name)} appears twice`);
    names.add(entry.name as string);
    // a file is one layer's, whether it lies here or in the baseline folder
    const fileKey = `${entry.from === 'baseline' ? 'baseline:' : ''}${entry.file as string}`;
    if (files.has(fileKey)) fail(`layers[${i}].file ${JSON.stringify(entry.file)}${entry.from === 'baseline' ? ' (in the baseline)' : ''} is used by two layers`);
    files.add(fileKey);
    const means = entry.means as ManifestLayer['means'];
    if (means !== undefined) {
      if (m.format === 2) fail(`layers[${i}].means is a format-3 field, but the manifest says format 2`);
      if (entry.keep !== 'full') fail(`layers[${i}].means is set, but the layer keeps channel means only (its file is the means file)`);
      const meansKey = `${entry.from === 'baseline' ? 'baseline:' : ''}${means.file}`;
      if (files.has(meansKey)) fail(`layers[${i}].means.file ${JSON.stringify(means.file)} is used by two files`);
      files.add(meansKey);
    }
    const paths: Array<[string, string]> = [[entry.file as string, 'file'], ...(means ? [[means.file, 'means.file'] as [string, string]] : [])];
    for (const [file, key] of paths) {
      if (entry.from !== 'baseline') {
        assertInside(folder, file, `${where}: layers[${i}].${key}`);
      } else if (isAbsolute(file) || file.split(/[\\/]/).includes('..')) {
        // resolved against the baseline folder by the reader; still never absolute or climbing out of it
        throw new UsageError('E_MANIFEST_PATH', `${where}: layers[${i}].${key} "${file}" must be a plain path inside the baseline folder`);
      }
    }
  });
  return m as unknown as SnapshotManifest;
}

/** Why a layout does not fit a shape (feature axis outside it, a scalar with axes, a grid of another token count), or null. */
function layoutMisfit(shape: readonly number[], layout: TensorLayout): string | null {
  if (layout.featureAxis === null) return layout.kind === 'scalar' && shape.length === 0 ? null : `has no feature axis but shape [${shape.join(', ')}] is not a scalar`;
  if (layout.featureAxis >= shape.length) return `has featureAxis ${layout.featureAxis}, outside shape [${shape.join(', ')}]`;
  if (layout.grid && layout.grid.prefix + layout.grid.height * layout.grid.width !== shape[0]) return `has a grid of ${layout.grid.prefix + layout.grid.height * layout.grid.width} tokens, not ${shape[0]}`;
  if (layout.heads !== undefined && shape[layout.featureAxis]! % layout.heads !== 0) return `has ${layout.heads} heads, which do not divide ${shape[layout.featureAxis]} features`;
  return null;
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

/**
 * What is inconsistent between a modulated snapshot's layers and its baseline's: a layer taken `from:
 * baseline` must be the baseline's layer of the same name, with its file, SHA-256, size, rows, shape,
 * storage type and keep mode (so two layers can never be mapped to one baseline file, nor a layer to
 * another's file); a layer recorded here must have the baseline's shape under the same name.
 * @returns one line per problem, empty when consistent.
 */
export function baselineLayerProblems(manifest: SnapshotManifest, base: SnapshotManifest): string[] {
  const problems: string[] = [];
  const byName = new Map(base.layers.map((l) => [l.name, l]));
  manifest.layers.forEach((entry, i) => {
    const own = byName.get(entry.name);
    if (!own) {
      problems.push(`layers[${i}] "${entry.name}" is not a layer of the baseline`);
      return;
    }
    if (JSON.stringify(own.shape) !== JSON.stringify(entry.shape)) problems.push(`layers[${i}] "${entry.name}" has shape [${entry.shape.join(', ')}], the baseline's [${own.shape.join(', ')}]`);
    else if (layerLayout(own).featureAxis !== layerLayout(entry).featureAxis) problems.push(`layers[${i}] "${entry.name}" has features on axis ${layerLayout(entry).featureAxis}, the baseline's on axis ${layerLayout(own).featureAxis}`);
    if (entry.from !== 'baseline') return;
    for (const key of ['file', 'sha256', 'bytes', 'rows', 'dtype', 'keep', 'compression', 'means'] as const) {
      if (JSON.stringify(own[key]) !== JSON.stringify(entry[key])) {
        problems.push(`layers[${i}] "${entry.name}" is taken from the baseline with ${key} ${JSON.stringify(entry[key])}, but the baseline's layer "${entry.name}" has ${JSON.stringify(own[key])}`);
        return;
      }
    }
  });
  return problems;
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
