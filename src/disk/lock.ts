/**
 * The writer lock of a snapshot folder: `DIR/.lock`, a small JSON file `{pid, host, started}` created
 * with O_EXCL, so that of two processes writing the same folder only one proceeds. A lock left behind by
 * a process that no longer exists on this host (`process.kill(pid, 0)` fails with ESRCH) is stale and is
 * taken over. Locks from another host are never judged stale: their process cannot be probed from here.
 *
 * An empty or malformed lock file is what a writer leaves between creating the file and writing its
 * owner into it, so it counts as held until it is `LOCK_GRACE_MS` old (by its modification time); only
 * an older one (a crash while writing it) is taken over.
 *
 * Known limit: taking over a stale lock is remove-then-create; two processes that both find the same
 * stale lock at the same instant could both proceed. Plain `open(O_EXCL)` keeps two live writers apart.
 */
import { closeSync, fsyncSync, openSync, rmSync, statSync, writeSync } from 'node:fs';
import { readInputText } from './input-file.js';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { RuntimeFailure } from '../errors.js';
import { onInterrupt } from './interrupt.js';

/** Name of the lock file inside a snapshot folder. */
export const LOCK_FILE = '.lock';

/** Age (ms) below which an empty or malformed lock file counts as being written by a live process. */
export const LOCK_GRACE_MS = 10_000;

/** What the lock file holds. */
export interface LockOwner {
  pid: number;
  host: string;
  /** ISO time the lock was taken. */
  started: string;
}

/** A held lock; `release()` removes the file if it is still ours. */
export interface FolderLock {
  /** Path of the lock file. */
  path: string;
  owner: LockOwner;
  /** The stale owner that was replaced, if any. */
  tookOverFrom: LockOwner | null;
  /** Removes the lock file when it still names this process; safe to call twice. */
  release(): void;
}

/** Options of `acquireLock`. */
export interface AcquireLockOptions {
  /** Called with a one-line notice when a stale lock is taken over. */
  onNotice?: (text: string) => void;
  /** Used in messages instead of the folder path (e.g. `--out base`). */
  label?: string;
}

/**
 * Takes the writer lock of `folder` (which must exist).
 * @param folder the snapshot folder.
 * @param options onNotice (stale-lock takeover), label for messages.
 * @returns the held lock.
 * @throws RuntimeFailure naming the owner's pid and host when another live process holds the lock (or one
 *   on another host), or when the lock file cannot be created.
 * Edge cases: an unreadable, empty or malformed lock file counts as held while it is younger than
 *   `LOCK_GRACE_MS` (its writer may be between creating and filling it), and as stale after that (a crash
 *   while writing it leaves one);
 * a lock naming this very process (re-entry) is refused like any other live owner.
 */
export function acquireLock(folder: string, options: AcquireLockOptions = {}): FolderLock {
  const path = join(folder, LOCK_FILE);
  const label = options.label ?? folder;
  const owner: LockOwner = { pid: process.pid, host: hostname(), started: new Date().toISOString() };
  let tookOverFrom: LockOwner | null = null;
  for (let attempt = 0; attempt < 3; attempt++) {
    let fd: number;
    try {
      fd = openSync(path, 'wx');
    } catch (error) {
      const code = (error as NodeJS.ErrnoException).code;
      if (code !== 'EEXIST') throw new RuntimeFailure('E_LOCK', `cannot create the lock file ${path}: ${(error as Error).message}`);
      const current = readLockOwner(path);
      if (current === null) {
        let ageMs: number;
        try {
          ageMs = Date.now() - statSync(path).mtimeMs;
        } catch {
          continue; // removed in the meantime: try to create it again
        }
        if (ageMs < LOCK_GRACE_MS) {
          throw new RuntimeFailure('E_LOCKED', `${label} has a lock file that is empty or unreadable and ${Math.max(0, Math.round(ageMs / 1000))} s old: another process may be taking the lock right now`, {
            hint: `try again in a few seconds; if no process is writing ${label}, remove ${path}`,
          });
        }
      }
      if (current && !isStale(current)) {
        throw new RuntimeFailure('E_LOCKED', `${label} is being written by pid ${current.pid} on ${current.host} (since ${current.started})`, {
          hint: current.host === owner.host ? 'wait for it to finish, or stop that process' : `if that process is gone, remove ${path}`,
        });
      }
      tookOverFrom = current ?? { pid: -1, host: 'unknown', started: 'unknown' };
      rmSync(path, { force: true });
      continue;
    }
    try {
      writeSync(fd, `${JSON.stringify(owner)}\n`);
      fsyncSync(fd);
    } finally {
      closeSync(fd);
    }
    if (tookOverFrom) {
      const who = tookOverFrom.pid >= 0 ? `pid ${tookOverFrom.pid} on ${tookOverFrom.host}, since ${tookOverFrom.started}` : 'unreadable lock file';
      options.onNotice?.(`took over the stale lock of ${label} (${who}; that process no longer exists)`);
    }
    let released = false;
    // an interrupted process (SIGINT, SIGTERM) releases its locks before it exits
    const unregister = onInterrupt(() => lock.release());
    const lock: FolderLock = {
      path,
      owner,
      tookOverFrom,
      release() {
        if (released) return;
        released = true;
        unregister();
        const now = readLockOwner(path);
        if (now && now.pid === owner.pid && now.host === owner.host && now.started === owner.started) rmSync(path, { force: true });
      },
    };
    return lock;
  }
  throw new RuntimeFailure('E_LOCK', `cannot take the lock ${path}: another process keeps replacing it`);
}

/** The owner recorded in a lock file, or null when it is missing or malformed. */
export function readLockOwner(path: string): LockOwner | null {
  let value: unknown;
  try {
    value = JSON.parse(readInputText(path, path, 4096)); // a FIFO or a huge file planted as .lock reads as malformed
  } catch {
    return null;
  }
  if (typeof value !== 'object' || value === null) return null;
  const v = value as Record<string, unknown>;
  if (!Number.isSafeInteger(v['pid']) || typeof v['host'] !== 'string' || typeof v['started'] !== 'string') return null;
  return { pid: v['pid'] as number, host: v['host'], started: v['started'] };
}

/**
 * Whether a lock's owner is gone: same host and `process.kill(pid, 0)` fails with ESRCH. EPERM means the
 * process exists (owned by someone else), so the lock is live; another host's lock is never stale.
 */
export function isStale(owner: LockOwner): boolean {
  if (owner.host !== hostname()) return false;
  if (owner.pid <= 0) return true;
  try {
    process.kill(owner.pid, 0);
    return false;
  } catch (error) {
    return (error as NodeJS.ErrnoException).code === 'ESRCH';
  }
}
