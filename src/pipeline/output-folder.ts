import { existsSync, mkdirSync, readdirSync, rmSync, statSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { UsageError } from '../errors.js';
import { acquireLock, LOCK_FILE, type FolderLock } from '../snapshot/lock.js';
import { readManifest, type SnapshotManifest } from '../snapshot/manifest.js';
import { readProgress, removeProgress, type ProgressRecord } from './progress-file.js';

/** Default parent folder for `--out` names without a slash. */
export const DEFAULT_SNAPSHOT_PARENT = 'snapshots';

/** `--out NAME` without a slash goes under `snapshots/`; anything else is a path. */
export function resolveOutFolder(out: string): string {
  if (!out || out.trim() === '') throw new UsageError('E_OUT', '--out is empty', { hint: 'name a folder, e.g. --out base' });
  return resolve(out.includes('/') || out.includes('\\') ? out : join(DEFAULT_SNAPSHOT_PARENT, out));
}

/**
 * Makes `folder` ready for a new recording. Refuses a folder holding a complete snapshot unless
 * `force`, and a non-empty folder that is not a snapshot at all; an incomplete snapshot is replaced.
 */
export function prepareOutFolder(folder: string, force: boolean): void {
  if (existsSync(folder)) {
    if (!statSync(folder).isDirectory()) throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`);
    // what a run killed before its first manifest leaves behind does not make the folder foreign
    const entries = readdirSync(folder).filter((name) => name !== LOCK_FILE && name !== 'manifest.json.partial' && !(name === 'layers' && statSync(join(folder, name)).isDirectory() && readdirSync(join(folder, name)).length === 0));
    if (entries.length > 0) {
      if (!entries.includes('manifest.json')) {
        throw new UsageError('E_OUT', `--out ${folder} is not empty and holds no snapshot; refusing to write into it`, { hint: 'choose a new folder' });
      }
      let complete = false;
      try {
        complete = readManifest(folder).complete;
      } catch {
        complete = false;
      }
      if (complete && !force) {
        throw new UsageError('E_OUT_EXISTS', `--out ${folder} already holds a complete snapshot`, { hint: 'pass --force to replace it, or choose another --out' });
      }
      rmSync(join(folder, 'layers'), { recursive: true, force: true });
      for (const name of ['manifest.json', 'manifest.json.partial', 'stimuli.arrow', 'stimuli.arrow.partial', 'modulation']) rmSync(join(folder, name), { recursive: true, force: true });
      removeProgress(folder);
    }
  }
  mkdirSync(join(folder, 'layers'), { recursive: true });
}

/** An output folder opened for writing: locked, and either fresh or holding a recording to resume. */
export interface OpenedOutput {
  folder: string;
  /** The writer lock; release it when done (also after errors). */
  lock: FolderLock;
  /** With `resume`: the interrupted recording's manifest and its last checkpoint (null: none reached). */
  resume: { manifest: SnapshotManifest; progress: ProgressRecord | null } | null;
  /** With `resume`: the folder already holds this complete snapshot; there is nothing to do. */
  complete: SnapshotManifest | null;
}

/** Options of `openOutputFolder`. */
export interface OpenOutputOptions {
  /** Replace a complete snapshot (ignored with `resume`, which never replaces one). */
  force: boolean;
  /** Continue an interrupted recording when the folder holds one; start afresh otherwise. */
  resume: boolean;
  /** Receives one-line notices (a stale lock taken over). */
  onNotice?: (text: string) => void;
}

/**
 * Creates (if needed) and locks an output folder, then prepares it: with `resume`, an incomplete
 * snapshot is kept for continuing, a complete one is reported (nothing is touched), and a missing or
 * empty folder starts afresh — so a resumed job can simply be run again until it completes. Without
 * `resume`, as `prepareOutFolder`.
 * @throws UsageError for a path that is not a folder, a non-empty folder that holds no snapshot, a
 *   complete snapshot without `force`, or (resuming) a malformed manifest; RuntimeFailure when another
 *   live process holds the lock, or the checkpoint file is damaged.
 */
export function openOutputFolder(folder: string, options: OpenOutputOptions): OpenedOutput {
  if (existsSync(folder) && !statSync(folder).isDirectory()) throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`);
  mkdirSync(folder, { recursive: true });
  const lock = acquireLock(folder, { label: `snapshot folder ${folder}`, ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
  try {
    if (options.resume && existsSync(join(folder, 'manifest.json'))) {
      const manifest = readManifest(folder);
      if (manifest.complete) return { folder, lock, resume: null, complete: manifest };
      mkdirSync(join(folder, 'layers'), { recursive: true });
      return { folder, lock, resume: { manifest, progress: readProgress(folder) }, complete: null };
    }
    prepareOutFolder(folder, options.force);
    return { folder, lock, resume: null, complete: null };
  } catch (error) {
    lock.release();
    throw error;
  }
}

/** A file-name-safe short form of a tensor name. */
export function slugify(name: string): string {
  const slug = name.replace(/[^A-Za-z0-9._-]+/g, '-').replace(/^[-.]+|-+$/g, '').slice(-60);
  return slug.length > 0 ? slug : 'tensor';
}
