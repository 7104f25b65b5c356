/**
 * The snapshot manifest (`manifest.json`): the contract every reader of a snapshot relies on.
 * FORMAT_VERSION changes whenever a field changes meaning; readers refuse versions they do not know.
 */
import { closeSync, existsSync, fsyncSync, openSync, readFileSync, renameSync, writeSync } from 'node:fs';
import { isAbsolute, join, relative, resolve } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';

/** Version of the snapshot layout written by this build. */
export const FORMAT_VERSION = 1;

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
}

/** The whole manifest. */
export interface SnapshotManifest {
  format: number;
  tool: { name: 'sonde'; version: string };
  model: { file: string; sha256: string; input: { name: string; shape: number[] } };
  stimuli: { source: string; count: number; digest: string; listingDigest: string; categories: string[] };
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
  /** True only after every file is flushed and renamed; written last. */
  complete: boolean;
  /** The error that stopped an incomplete recording, if known. */
  error?: string;
}

/**
 * Reads and validates `manifest.json` of a snapshot folder.
 * @throws UsageError when the folder or manifest is missing, not JSON, of an unknown format version,
 *   or names files outside the folder.
 */
export function readManifest(folder: string): SnapshotManifest {
  const path = join(folder, 'manifest.json');
  if (!existsSync(folder)) throw new UsageError('E_SNAPSHOT_MISSING', `snapshot ${folder} does not exist`);
  if (!existsSync(path)) throw new UsageError('E_SNAPSHOT_MISSING', `${folder} is not a snapshot (no manifest.json)`);
  let parsed: unknown;
  try {
    parsed = JSON.parse(readFileSync(path, 'utf8'));
  } catch (error) {
    throw new UsageError('E_MANIFEST', `${path} is not valid JSON (${(error as Error).message})`);
  }
  return validateManifest(parsed, folder);
}

/** Checks the structure of a parsed manifest; see `readManifest`. */
export function validateManifest(value: unknown, folder: string): SnapshotManifest {
  const where = `${folder}/manifest.json`;
  if (typeof value !== 'object' || value === null || Array.isArray(value)) throw new UsageError('E_MANIFEST', `${where} is not a JSON object`);
  const m = value as Record<string, unknown>;
  if (m.format !== FORMAT_VERSION) {
    throw new UsageError('E_MANIFEST_VERSION', `${where} has format ${JSON.stringify(m.format)}; this Sonde reads format ${FORMAT_VERSION}`, {
      hint: 'record the snapshot again with this version',
    });
  }
  const model = m.model as Record<string, unknown> | undefined;
  if (!model || typeof model.sha256 !== 'string' || typeof model.file !== 'string') throw new UsageError('E_MANIFEST', `${where}: "model" must have "file" and "sha256"`);
  const stimuli = m.stimuli as Record<string, unknown> | undefined;
  if (!stimuli || typeof stimuli.count !== 'number' || !Number.isInteger(stimuli.count) || stimuli.count < 0 || typeof stimuli.digest !== 'string') {
    throw new UsageError('E_MANIFEST', `${where}: "stimuli" must have an integer "count" and a "digest"`);
  }
  if (!Array.isArray(m.layers)) throw new UsageError('E_MANIFEST', `${where}: "layers" must be an array`);
  m.layers.forEach((layer: unknown, i: number) => {
    const l = layer as Record<string, unknown>;
    if (typeof l !== 'object' || l === null || typeof l.name !== 'string' || typeof l.file !== 'string' || !Array.isArray(l.shape) || !l.shape.every((d) => Number.isInteger(d) && (d as number) >= 0)) {
      throw new UsageError('E_MANIFEST', `${where}: layers[${i}] must have "name", "file" and an integer "shape"`);
    }
    if (l.keep !== 'full' && l.keep !== 'channels') throw new UsageError('E_MANIFEST', `${where}: layers[${i}].keep must be "full" or "channels"`);
    if (l.dtype !== 'float32' && l.dtype !== 'float16') throw new UsageError('E_MANIFEST', `${where}: layers[${i}].dtype must be "float32" or "float16"`);
    assertInside(folder, l.file, `${where}: layers[${i}].file`);
  });
  if (typeof m.complete !== 'boolean') throw new UsageError('E_MANIFEST', `${where}: "complete" must be true or false`);
  return m as unknown as SnapshotManifest;
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
  if (rel === '' || rel.startsWith('..') || isAbsolute(rel)) {
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
  const path = join(folder, 'manifest.json');
  const temporary = `${path}.partial`;
  try {
    const fd = openSync(temporary, 'w');
    try {
      writeSync(fd, `${JSON.stringify(manifest, null, 2)}\n`);
      fsyncSync(fd);
    } finally {
      closeSync(fd);
    }
    renameSync(temporary, path);
  } catch (error) {
    const code = (error as NodeJS.ErrnoException).code;
    throw new RuntimeFailure('E_WRITE', `cannot write ${path}: ${code === 'ENOSPC' ? 'the disk is full' : (error as Error).message}`);
  }
}
