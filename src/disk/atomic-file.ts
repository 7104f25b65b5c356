/**
 * Replacing a small file so that a reader — or a recording resumed after a crash — sees either the old
 * content or the new one, never a torn file: write a temporary file, fsync it, rename it over the
 * target, fsync the folder (POSIX rename(2) is atomic; the directory entry is durable only after an
 * fsync of the directory). A failed write (a full disk) deletes the temporary file and leaves the
 * target as it was.
 *
 * The temporary file has a name of its own per writer (`PATH.<pid>-<8 hex>.partial`) and is created
 * exclusively (O_CREAT|O_EXCL, which never follows a symbolic link): a link planted at a temporary name
 * cannot redirect the write, and two processes writing one output at once each write whole files — the
 * last rename wins, none is torn.
 */
import { randomBytes } from 'node:crypto';
import { closeSync, fsyncSync, openSync, renameSync, rmSync, writeSync } from 'node:fs';
import { dirname } from 'node:path';
import { writeFailure, type WriteFault } from './write-failure.js';

/** Matches the suffix `uniqueTemporary` appends (`.<pid>-<8 hex>.partial`). */
export const UNIQUE_TEMPORARY = /\.\d+-[0-9a-f]{8}\.partial$/;

/** A temporary name beside `path` that no other writer uses: `PATH.<pid>-<8 random hex>.partial`. */
export function uniqueTemporary(path: string): string {
  return `${path}.${process.pid}-${randomBytes(4).toString('hex')}.partial`;
}

/**
 * Replaces the file at `path` with `content` (text is written as UTF-8) atomically; the temporary file
 * (`uniqueTemporary`, created exclusively) is removed again when the write fails.
 * @throws RuntimeFailure (E_WRITE) naming the file when it cannot be written (e.g. the disk is full).
 */
export function replaceFile(path: string, content: string | Uint8Array): void {
  const temporary = uniqueTemporary(path);
  const bytes = typeof content === 'string' ? Buffer.from(content, 'utf8') : content;
  let written = false;
  let created = false;
  try {
    const fd = openSync(temporary, 'wx', 0o644);
    created = true;
    try {
      let offset = 0;
      while (offset < bytes.byteLength) {
        const fault = replaceFault?.(temporary, offset, bytes.byteLength - offset);
        if (fault) throw fault;
        offset += writeSync(fd, bytes, offset, bytes.byteLength - offset);
      }
      fsyncSync(fd);
    } finally {
      closeSync(fd);
    }
    renameSync(temporary, path);
    written = true;
    syncFolder(dirname(path));
  } catch (error) {
    if (!written && created) rmSync(temporary, { force: true });
    throw writeFailure(path, error);
  }
}

let replaceFault: WriteFault | null = null;

/**
 * Test hook: makes `replaceFile` writes fail as `fault` decides (the sink's `injectWriteFault` covers
 * Arrow files); null removes it. Production code never sets it.
 */
export function injectReplaceFault(fault: WriteFault | null): void {
  replaceFault = fault;
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
