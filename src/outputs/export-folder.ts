/**
 * The folder rule of `sonde export`: an export folder holds `export.json` (written first with
 * `complete: false`, last with `complete: true`), `layers/NNN-slug.npy` and `layers/NNN-slug.means.npy`,
 * their temporaries, and the writer lock. A folder holding only those is Sonde's: an interrupted export
 * is replaced, a complete one only with `force`. Anything else in it makes the folder foreign, and a
 * foreign folder is refused with or without `force` (Sonde deletes only what it wrote).
 */
import { existsSync, lstatSync, mkdirSync, readdirSync, readFileSync, rmSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { UsageError } from '../errors.js';
import { LOCK_FILE } from '../disk/lock.js';

/** The export's own description file (coordinates, layers, source). */
export const EXPORT_FILE = 'export.json';

/** Top-level entries an export writes besides `layers/`. */
export const EXPORT_ENTRIES: ReadonlySet<string> = new Set([EXPORT_FILE, `${EXPORT_FILE}.partial`, LOCK_FILE]);

/** How an export names its array files: `NNN-slug.npy` (activations) and `NNN-slug.means.npy`, `.partial` while written. */
export const EXPORT_ARRAY_FILE = /^\d{3,}-[A-Za-z0-9._-]+\.npy(\.partial)?$/;

/** What an export folder holds, decided before anything in it is touched. */
export interface ExportFolderState {
  /** `fresh`: missing or empty; `export`: written by an export (complete or not); `foreign`: anything else. */
  kind: 'fresh' | 'export' | 'foreign';
  /** For `export`: whether its `export.json` says `complete: true`. */
  complete: boolean;
  /** Files the export wrote, relative to the folder (the lock excluded). */
  owned: string[];
  /** Entries Sonde did not write (at most 20). */
  foreign: string[];
}

/**
 * Looks at an export folder without changing it.
 * @throws UsageError E_OUT when the path exists and is not a folder.
 */
export function inspectExportFolder(folder: string): ExportFolderState {
  if (!existsSync(folder)) return { kind: 'fresh', complete: false, owned: [], foreign: [] };
  if (!statSync(folder).isDirectory()) throw new UsageError('E_OUT', `--out ${folder} exists and is not a folder`, { hint: 'choose a new or empty folder' });
  const owned: string[] = [];
  const foreign: string[] = [];
  for (const name of readdirSync(folder).sort()) {
    const stat = lstatSync(join(folder, name));
    if (name === 'layers' && stat.isDirectory()) {
      for (const file of readdirSync(join(folder, name)).sort()) {
        if (EXPORT_ARRAY_FILE.test(file) && lstatSync(join(folder, name, file)).isFile()) owned.push(`layers/${file}`);
        else foreign.push(`layers/${file}`);
      }
    } else if (EXPORT_ENTRIES.has(name) && stat.isFile()) {
      if (name !== LOCK_FILE) owned.push(name);
    } else foreign.push(name);
  }
  const mark = owned.includes(EXPORT_FILE) ? readExportMark(join(folder, EXPORT_FILE)) : null;
  if (foreign.length === 0 && owned.length === 0) return { kind: 'fresh', complete: false, owned, foreign };
  // array files without an export.json that says Sonde wrote it are not known to be Sonde's
  if (mark === null || foreign.length > 0) return { kind: 'foreign', complete: false, owned, foreign: [...(mark === null ? owned : []), ...foreign].slice(0, 20) };
  return { kind: 'export', complete: mark.complete, owned, foreign };
}

/** `complete` of an `export.json` that says Sonde wrote it; null for any other file. */
function readExportMark(path: string): { complete: boolean } | null {
  try {
    const value = JSON.parse(readFileSync(path, 'utf8')) as { kind?: unknown; tool?: { name?: unknown }; complete?: unknown } | null;
    if (typeof value !== 'object' || value === null || value.kind !== 'sonde-export' || value.tool?.name !== 'sonde') return null;
    return { complete: value.complete === true };
  } catch {
    return null;
  }
}

/**
 * Makes `folder` ready for an export: creates it, or empties it of exactly what an earlier export wrote
 * (an interrupted one always, a complete one only with `force`), then creates `layers/`.
 * @throws UsageError E_OUT (not a folder; holds entries an export did not write, listed), E_OUT_EXISTS
 *   (a complete export without `force`).
 */
export function prepareExportFolder(folder: string, force: boolean): void {
  const state = assertExportFolderUsable(folder, force);
  for (const name of state.owned) rmSync(join(folder, name), { force: true });
  mkdirSync(join(folder, 'layers'), { recursive: true });
}

/**
 * Throws unless an export may go into `folder` (see `prepareExportFolder`); changes nothing, so it can
 * run before the folder's lock is taken.
 * @returns the folder's state.
 * @throws UsageError as `prepareExportFolder`.
 */
export function assertExportFolderUsable(folder: string, force: boolean): ExportFolderState {
  const state = inspectExportFolder(folder);
  if (state.kind === 'foreign') {
    throw new UsageError('E_OUT', `--out ${folder} is not empty and is not an export folder (found ${state.foreign.join(', ')}${state.foreign.length >= 20 ? ', …' : ''}); refusing to write into it${force ? ', even with --force (Sonde only deletes what it wrote)' : ''}`, {
      hint: 'choose a new or empty folder',
    });
  }
  if (state.kind === 'export' && state.complete && !force) {
    throw new UsageError('E_OUT_EXISTS', `--out ${folder} already holds a complete export`, { hint: 'pass --force to replace it, or choose another --out' });
  }
  return state;
}
