import { createHash, type Hash } from 'node:crypto';
import { closeSync, fsyncSync, openSync, renameSync, rmSync, writeSync } from 'node:fs';
import { AsyncByteQueue } from 'apache-arrow';
import { RuntimeFailure } from '../errors.js';

/**
 * A byte sink for apache-arrow's IPC writers that writes straight to a file descriptor (no queueing in
 * memory) and hashes what it writes. The file is created under a temporary name and renamed over the
 * final name only by `commit`, so a crash never leaves a half-written file under the final name.
 */
export class HashingFileSink extends AsyncByteQueue {
  private fd: number;
  private readonly hash: Hash = createHash('sha256');
  private bytesWritten = 0;
  private readonly temporaryPath: string;

  constructor(readonly finalPath: string) {
    super();
    this.temporaryPath = `${finalPath}.partial`;
    try {
      this.fd = openSync(this.temporaryPath, 'w');
    } catch (error) {
      throw writeFailure(this.temporaryPath, error);
    }
  }

  override write(value: ArrayBufferView | Uint8Array | ArrayBuffer): void {
    const bytes = value instanceof Uint8Array ? value : ArrayBuffer.isView(value) ? new Uint8Array(value.buffer, value.byteOffset, value.byteLength) : new Uint8Array(value);
    if (bytes.byteLength === 0) return;
    try {
      let offset = 0;
      while (offset < bytes.byteLength) offset += writeSync(this.fd, bytes, offset, bytes.byteLength - offset);
    } catch (error) {
      throw writeFailure(this.temporaryPath, error);
    }
    this.hash.update(bytes);
    this.bytesWritten += bytes.byteLength;
  }

  // The writer calls close() on its sink when it finishes; the file is closed by commit()/discard().
  override close(): void {}

  /** Flushes to disk, renames to the final name, and returns the file's SHA-256 and size. */
  commit(): { sha256: string; bytes: number } {
    try {
      fsyncSync(this.fd);
      closeSync(this.fd);
      this.fd = -1;
      renameSync(this.temporaryPath, this.finalPath);
    } catch (error) {
      throw writeFailure(this.finalPath, error);
    }
    return { sha256: this.hash.digest('hex'), bytes: this.bytesWritten };
  }

  /** Closes and deletes the temporary file (after an error). */
  discard(): void {
    try {
      if (this.fd >= 0) closeSync(this.fd);
    } catch {
      // already closed
    }
    this.fd = -1;
    rmSync(this.temporaryPath, { force: true });
  }
}

/** Turns a file-system error into a one-line RuntimeFailure naming the file. */
export function writeFailure(path: string, error: unknown): RuntimeFailure {
  const code = (error as NodeJS.ErrnoException).code;
  const reason = code === 'ENOSPC' ? 'the disk is full' : code === 'EACCES' || code === 'EPERM' ? 'permission denied' : (error as Error).message;
  return new RuntimeFailure('E_WRITE', `cannot write ${path}: ${reason}`);
}
