/**
 * Replacing a small file so that a reader — or a recording resumed after a crash — sees either the old
 * content or the new one, never a torn file: write a temporary file, fsync it, rename it over the
 * target, fsync the folder (POSIX rename(2) is atomic; the directory entry is durable only after an
 * fsync of the directory).
 */
import { closeSync, fsyncSync, openSync, renameSync, writeSync } from 'node:fs';
import { dirname } from 'node:path';
import { writeFailure } from './arrow-sink.js';

/**
 * Replaces the file at `path` with `text` atomically; the temporary file is `PATH.partial` beside it.
 * @throws RuntimeFailure (E_WRITE) naming the file when it cannot be written (e.g. the disk is full).
 */
export function replaceFile(path: string, text: string): void {
  const temporary = `${path}.partial`;
  try {
    const fd = openSync(temporary, 'w');
    try {
      writeSync(fd, text);
      fsyncSync(fd);
    } finally {
      closeSync(fd);
    }
    renameSync(temporary, path);
    syncFolder(dirname(path));
  } catch (error) {
    throw writeFailure(path, error);
  }
}

/**
 * fsyncs a folder, so that renames inside it survive a power loss. Platforms that cannot open a folder
 * skip it.
 */
function syncFolder(folder: string): void {
  let fd: number;
  try {
    fd = openSync(folder, 'r');
  } catch {
    return;
  }
  try {
    fsyncSync(fd);
  } catch {
    // some file systems refuse fsync on a directory; the rename itself has happened
  } finally {
    closeSync(fd);
  }
}
