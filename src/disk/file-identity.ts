/**
 * Which file, in which state: device and inode (the file itself, whatever name leads to it), size and
 * the modification and status-change times. A file that still has the identity it had when it was read
 * holds the bytes that were read, as far as the file system can tell without reading them again: the
 * same test build tools and file synchronisers make (any write changes the modification time; renaming
 * another file over the name changes the inode).
 */
import { fstatSync, statSync, type Stats } from 'node:fs';

/** A file's identity at one moment (see the module comment). */
export interface FileIdentity {
  /** The file's real path (links resolved). */
  path: string;
  dev: number;
  ino: number;
  size: number;
  mtimeMs: number;
  ctimeMs: number;
}

/** The identity of the file behind `stats`, read at `path`. */
export function identityOf(path: string, stats: Stats): FileIdentity {
  return { path, dev: stats.dev, ino: stats.ino, size: stats.size, mtimeMs: stats.mtimeMs, ctimeMs: stats.ctimeMs };
}

/** The identity of an open file. */
export function identityOfOpen(path: string, fd: number): FileIdentity {
  return identityOf(path, fstatSync(fd));
}

/**
 * Whether the file at `identity.path` is still the file, in the state, that `identity` describes; false
 * when it is gone or cannot be stat'ed.
 */
export function unchanged(identity: FileIdentity): boolean {
  let now: Stats;
  try {
    now = statSync(identity.path);
  } catch {
    return false;
  }
  return sameState(identityOf(identity.path, now), identity);
}

/** Whether two identities name the same file in the same state (paths aside). */
export function sameState(a: FileIdentity, b: FileIdentity): boolean {
  return a.dev === b.dev && a.ino === b.ino && a.size === b.size && a.mtimeMs === b.mtimeMs && a.ctimeMs === b.ctimeMs;
}
