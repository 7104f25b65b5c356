import { existsSync, mkdirSync, readdirSync, rmSync, statSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { UsageError } from '../errors.js';
import { readManifest } from '../snapshot/manifest.js';

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
    const entries = readdirSync(folder);
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
      for (const name of ['manifest.json', 'stimuli.arrow', 'modulation']) rmSync(join(folder, name), { recursive: true, force: true });
    }
  }
  mkdirSync(join(folder, 'layers'), { recursive: true });
}

/** A file-name-safe short form of a tensor name. */
export function slugify(name: string): string {
  const slug = name.replace(/[^A-Za-z0-9._-]+/g, '-').replace(/^[-.]+|-+$/g, '').slice(-60);
  return slug.length > 0 ? slug : 'tensor';
}
