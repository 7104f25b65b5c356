/**
 * Checks on files a user hands in (a model, its external weights, stimuli, a snapshot's files) made
 * before they are opened. Opening a FIFO for reading blocks until some writer opens it, and reading a
 * character device (`/dev/zero`, `/dev/urandom`) never ends, so only regular files are read. A symbolic
 * link is followed, but a file that must live in a folder (a layer file in its snapshot, external
 * weights beside their model) must resolve there: its real path must lie inside the folder's real path.
 */
import { realpathSync, statSync, type Stats } from 'node:fs';
import { isAbsolute, relative, sep } from 'node:path';
import { UsageError } from '../errors.js';

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
