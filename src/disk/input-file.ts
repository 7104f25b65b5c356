/**
 * Checks on files a user hands in (a model, its external weights, stimuli, a snapshot's files) made
 * before they are opened. Opening a FIFO for reading blocks until some writer opens it, and reading a
 * character device (`/dev/zero`, `/dev/urandom`) never ends, so only regular files are read. A symbolic
 * link is followed, but a file that must live in a folder (a layer file in its snapshot, external
 * weights beside their model) must resolve there: its real path must lie inside the folder's real path.
 */
import { closeSync, constants, fstatSync, openSync, readSync, realpathSync, statSync, type Stats } from 'node:fs';
import { isAbsolute, relative, sep } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';

/**
 * What a non-regular file is, in words, from its `stat` (symbolic links already followed).
 * @returns e.g. "a FIFO (named pipe)", or null for a regular file.
 */
export function describeNonRegular(stats: Stats): string | null {
  if (stats.isFile()) return null;
  if (stats.isDirectory()) return 'a folder';
  if (stats.isFIFO()) return 'a FIFO (named pipe)';
  if (stats.isSocket()) return 'a socket';
  if (stats.isCharacterDevice()) return 'a character device';
  if (stats.isBlockDevice()) return 'a block device';
  return 'not a regular file';
}

/**
 * Throws unless `path` (after following links) is a regular file. Uses `stat`, which never blocks on a
 * FIFO, so it is safe to call before opening.
 * @param path the file.
 * @param what how messages name it, e.g. `model x.onnx` or `layer file layers/000-a.arrow`.
 * @returns the file's stats.
 * @throws UsageError `E_NOT_A_FILE` naming the file and what it is instead; errors of `stat` itself
 *   (ENOENT, EACCES) are passed through for the caller's own message.
 */
export function assertRegularFile(path: string, what: string): Stats {
  const stats = statSync(path);
  const kind = describeNonRegular(stats);
  if (kind) {
    throw new UsageError('E_NOT_A_FILE', `${what} is ${kind}, not a regular file; Sonde reads only regular files`, {
      hint: 'pass the path of an ordinary file (copy the data into one)',
    });
  }
  return stats;
}

/**
 * The real path of `path` when it lies inside the real path of `folder` (links followed on both).
 * @param folder the folder the file must live in.
 * @param path the file (absolute, or relative to the working folder).
 * @param what how messages name the file.
 * @returns the real path of `path`.
 * @throws UsageError `E_LINK_OUTSIDE` when a symbolic link (the file itself or a folder on its way)
 *   makes it resolve outside `folder`; errors of `realpath` itself (ENOENT) are passed through.
 */
export function realPathInside(folder: string, path: string, what: string): string {
  const root = realpathSync(folder);
  const real = realpathSync(path);
  const rel = relative(root, real);
  if (rel === '' || rel === '..' || rel.startsWith(`..${sep}`) || isAbsolute(rel)) {
    throw new UsageError('E_LINK_OUTSIDE', `${what} resolves to ${real}, outside ${root} (a symbolic link points out of the folder)`, {
      hint: 'replace the link with a copy of the file inside the folder',
    });
  }
  return real;
}

/**
 * Size limits of the files Sonde reads whole into memory, by kind. A file over its limit is refused
 * before it is read (a `/dev/zero` or a runaway export would otherwise grow the process until it
 * aborts). JSON is parsed as one string, and V8 strings end at 2^29 − 24 characters, so no JSON kind
 * may exceed 512 MiB.
 */
export const INPUT_LIMITS = {
  /** Modulation specs, model sidecars, a snapshot's manifest, progress and lock files. */
  json: 64 * 2 ** 20,
  /** A spec's per-channel `values` file (.npy or JSON). */
  values: 64 * 2 ** 20,
  /** A partial-statistics file (grows with stimuli × layers). */
  partial: 500 * 2 ** 20,
  /** `report` inputs (diff.json, sweep.json, comparison.json). */
  report: 256 * 2 ** 20,
  /** Tuning and sensitivity tables, `stimuli.arrow`. */
  table: 1024 * 2 ** 20,
  /** A CSV stimulus listing or labels file. */
  listing: 256 * 2 ** 20,
} as const;

/**
 * Reads a whole user file safely: opened without blocking (a FIFO then opens at once instead of waiting
 * for a writer), checked by `fstat` on the open descriptor (so a file swapped after an earlier check is
 * still caught) to be a regular file no larger than `limit`, and read to its end — at most `limit`
 * bytes, whatever the file claims.
 * @param path the file (links followed).
 * @param what how messages name it, e.g. `modulation spec gain.yaml`.
 * @param limit the largest size accepted, in bytes (see `INPUT_LIMITS`).
 * @returns the bytes.
 * @throws UsageError `E_NOT_A_FILE` (a FIFO, device, socket or folder), `E_INPUT_TOO_LARGE` (over
 *   `limit`); errors of `open` itself (ENOENT, EACCES) are passed through for the caller's message.
 */
export function readInputFile(path: string, what: string, limit: number): Buffer {
  const fd = openSync(path, constants.O_RDONLY | constants.O_NONBLOCK);
  try {
    const stats = fstatSync(fd);
    const kind = describeNonRegular(stats);
    if (kind) {
      throw new UsageError('E_NOT_A_FILE', `${what} is ${kind}, not a regular file; Sonde reads only regular files`, {
        hint: 'pass the path of an ordinary file (copy the data into one)',
      });
    }
    const tooLarge = (size: string) =>
      new UsageError('E_INPUT_TOO_LARGE', `${what} is ${size}, more than the ${megabytes(limit)} Sonde reads for this kind of file`, { hint: 'check that this is the right file' });
    if (stats.size > limit) throw tooLarge(megabytes(stats.size));
    let bytes = Buffer.allocUnsafe(Math.min(limit, stats.size) + 1);
    let length = 0;
    for (;;) {
      if (length === bytes.length) {
        // the file grew since fstat: read on, but never past the limit
        if (length > limit) throw tooLarge(`larger than ${megabytes(limit)} (it grew while being read)`);
        const grown = Buffer.allocUnsafe(Math.min(limit + 1, 2 * length + 1));
        bytes.copy(grown, 0, 0, length);
        bytes = grown;
      }
      const read = readSync(fd, bytes, length, bytes.length - length, null);
      if (read === 0) break;
      length += read;
    }
    return bytes.subarray(0, length);
  } catch (error) {
    if ((error as NodeJS.ErrnoException).code === 'EAGAIN') throw new RuntimeFailure('E_INPUT_READ', `${what} cannot be read without waiting (EAGAIN)`, { hint: 'pass an ordinary file' });
    throw error;
  } finally {
    closeSync(fd);
  }
}

/** Reads a UTF-8 text file through `readInputFile`. */
export function readInputText(path: string, what: string, limit: number): string {
  return readInputFile(path, what, limit).toString('utf8');
}

function megabytes(bytes: number): string {
  return bytes >= 2 ** 20 ? `${(bytes / 2 ** 20).toFixed(bytes % 2 ** 20 === 0 ? 0 : 1)} MiB` : `${bytes} bytes`;
}
