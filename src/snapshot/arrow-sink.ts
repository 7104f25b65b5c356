import { createHash, type Hash } from 'node:crypto';
import { closeSync, constants, fstatSync, fsyncSync, ftruncateSync, openSync, readSync, renameSync, rmSync, writeSync } from 'node:fs';
import { uniqueTemporary } from '../disk/atomic-file.js';
import { AsyncByteQueue } from 'apache-arrow';
import { RuntimeFailure } from '../errors.js';
import { writeFailure, type WriteFault } from '../disk/write-failure.js';
import { BackgroundWriteError, type BackgroundWriter } from './background-writer.js';

/**
 * A byte sink for apache-arrow's IPC writers that writes straight to a file descriptor (no queueing in
 * memory) and hashes what it writes. The file is created under a temporary name and renamed over the
 * final name only by `commit`, so a crash never leaves a half-written file under the final name.
 *
 * Resuming (`resumeAt`): an interrupted `.partial` file is truncated to a byte length known to be a
 * complete prefix (a checkpoint), that prefix is hashed again, and writing continues after it, so the
 * finished file and its SHA-256 are the same as an uninterrupted write of the same bytes.
 */
export class HashingFileSink extends AsyncByteQueue {
  private fd: number;
  private readonly hash: Hash = createHash('sha256');
  private bytesWritten = 0;
  private readonly temporaryPath: string;
  /** With a background writer: its stream for this file (writes, hashing and fsync happen on its thread). */
  private readonly background: BackgroundWriter | null;
  private stream = 0;
  /** ArrayBuffers the caller gave up (`donate`): chunks on them move to the writer thread uncopied. */
  private readonly donated = new Set<ArrayBufferLike>();
  /** ArrayBuffers already moved: a chunk on one of them would be empty (detached), which must never pass silently. */
  private readonly moved = new WeakSet<ArrayBufferLike>();
  /** A donated chunk written last, not yet moved (see `write`). */
  private pending: { bytes: Uint8Array; position: number } | null = null;
  /** Small chunks gathered for one message to the writer thread: `staged` bytes from file position `stagingAt`. */
  private staging: Uint8Array | null = null;
  private staged = 0;
  private stagingAt = 0;

  /**
   * @param finalPath the name the file gets on `commit`; it is written as `finalPath.partial` (inside a
   *   locked snapshot folder, where a resume finds it again), or with `unique` under a name of this
   *   writer's own (`uniqueTemporary`: single-file outputs two processes might write at once). A fresh
   *   temporary is created exclusively (an entry already at a fixed name — a leftover, or a planted
   *   link — is removed first, never followed); a resumed one is opened without following links.
   * @param options `resumeAt`: keep the first `resumeAt` bytes of an existing `.partial` file (truncating
   *   anything after them) and append after them; `resumeSha256`: the SHA-256 those bytes had at the
   *   checkpoint (from `prefixSha256`), checked before anything is truncated; `unique`: see above;
   *   `background`: write and hash on that writer's thread (see background-writer.ts) instead of the
   *   caller's; `writeBytes`: the usual size of one write, for that writer's choice of direct writes.
   * @throws RuntimeFailure when the file cannot be opened, or (resuming) is missing, shorter than
   *   `resumeAt`, or its first `resumeAt` bytes no longer have the checkpoint's SHA-256.
   */
  constructor(readonly finalPath: string, options: { resumeAt?: number; resumeSha256?: string; unique?: boolean; background?: BackgroundWriter; writeBytes?: number } = {}) {
    super();
    this.temporaryPath = options.unique ? uniqueTemporary(finalPath) : `${finalPath}.partial`;
    this.background = options.background ?? null;
    const resumeAt = options.resumeAt;
    if (resumeAt === undefined) {
      try {
        if (!options.unique) rmSync(this.temporaryPath, { force: true }); // unlinks a link itself, not its target
        this.fd = openSync(this.temporaryPath, 'wx', 0o644);
      } catch (error) {
        throw writeFailure(this.temporaryPath, error);
      }
      if (this.background) this.stream = this.background.open(this.fd, this.temporaryPath, 0, () => this.handOver(), options.writeBytes);
      return;
    }
    try {
      this.fd = openSync(this.temporaryPath, constants.O_RDWR | constants.O_NOFOLLOW);
    } catch (error) {
      throw new RuntimeFailure('E_RESUME', `cannot resume ${this.temporaryPath}: ${(error as NodeJS.ErrnoException).code === 'ENOENT' ? 'the file is missing' : (error as Error).message}`, {
        hint: 'record again without --resume',
      });
    }
    const size = fstatSync(this.fd).size;
    if (size < resumeAt) {
      closeSync(this.fd);
      throw new RuntimeFailure('E_RESUME', `cannot resume ${this.temporaryPath}: it holds ${size} bytes but the checkpoint says ${resumeAt}`, { hint: 'record again without --resume' });
    }
    try {
      const chunk = new Uint8Array(Math.min(resumeAt, 1 << 22) || 1);
      let at = 0;
      while (at < resumeAt) {
        const read = readSync(this.fd, chunk, 0, Math.min(chunk.length, resumeAt - at), at);
        if (read <= 0) throw new Error(`unexpected end of file at byte ${at}`);
        this.hash.update(chunk.subarray(0, read));
        at += read;
      }
    } catch (error) {
      closeSync(this.fd);
      throw writeFailure(this.temporaryPath, error);
    }
    if (options.resumeSha256 !== undefined && this.hash.copy().digest('hex') !== options.resumeSha256) {
      closeSync(this.fd);
      throw new RuntimeFailure('E_RESUME', `cannot resume ${this.temporaryPath}: its first ${resumeAt} bytes changed since the checkpoint (SHA-256 differs from progress.json)`, {
        hint: 'the partial file was damaged or replaced; record again without --resume (into a new folder, or with --force)',
      });
    }
    try {
      ftruncateSync(this.fd, resumeAt);
    } catch (error) {
      closeSync(this.fd);
      throw writeFailure(this.temporaryPath, error);
    }
    this.bytesWritten = resumeAt;
    if (this.background) this.stream = this.background.open(this.fd, this.temporaryPath, resumeAt, () => this.handOver(), options.writeBytes);
  }

  /** SHA-256 (hex) of the bytes written so far (the file stays open; hashing continues). */
  prefixSha256(): string {
    if (this.background) return this.backgroundCall(() => this.background!.sha256(this.stream)).toString('hex');
    return this.hash.copy().digest('hex');
  }

  /**
   * Gives up `buffer`: a chunk written later that lies on it may move to the writer thread without a
   * copy (background mode only; the caller must not use the buffer again). `undonate` withdraws what
   * was not written.
   */
  donate(buffer: ArrayBufferLike): void {
    if (this.background) this.donated.add(buffer);
  }

  /** Withdraws every donation not used by a write (and hands on a donated chunk still held). */
  undonate(): void {
    this.donated.clear();
    try {
      this.flushPending();
    } catch (error) {
      throw this.failure(error);
    }
  }

  /** Hands every chunk held back (a donated one, staged small ones) to the writer thread. */
  private handOver(): void {
    this.flushPending();
    this.flushStaging();
  }

  /** Moves a donated chunk held back by `write` to the writer thread. */
  private flushPending(): void {
    if (!this.pending) return;
    const { bytes, position } = this.pending;
    this.pending = null;
    this.background!.write(this.stream, bytes, position, true);
  }

  /** Moves the staged small chunks to the writer thread (they always follow a pending chunk). */
  private flushStaging(): void {
    if (!this.staging) return;
    const staged = this.staging.subarray(0, this.staged);
    this.staging = null;
    this.staged = 0;
    this.background!.write(this.stream, staged, this.stagingAt, true);
  }

  /** Bytes in the file so far. */
  get byteLength(): number {
    return this.bytesWritten;
  }

  override write(value: ArrayBufferView | Uint8Array | ArrayBuffer): void {
    const bytes = value instanceof Uint8Array ? value : ArrayBuffer.isView(value) ? new Uint8Array(value.buffer, value.byteOffset, value.byteLength) : new Uint8Array(value);
    if (this.moved.has(bytes.buffer)) throw new Error(`internal: a chunk of ${this.temporaryPath} lies on memory already handed to the writer thread`);
    if (bytes.byteLength === 0) return;
    try {
      if (writeFault) {
        const fault = writeFault(this.temporaryPath, this.bytesWritten, bytes.byteLength);
        if (fault) throw fault;
      }
      if (this.background) {
        this.flushPending();
        if (this.donated.delete(bytes.buffer)) {
          this.flushStaging();
          // moved only at the next call: the Arrow writer reads the chunk's length after this call returns
          this.moved.add(bytes.buffer);
          this.pending = { bytes, position: this.bytesWritten };
        } else if (bytes.byteLength <= STAGED_CHUNK_BYTES) {
          // small chunks (Arrow metadata, padding, indices, means) travel together, one message per stage
          if (this.staging && this.staged + bytes.byteLength > this.staging.length) this.flushStaging();
          if (!this.staging) {
            this.staging = new Uint8Array(STAGE_BYTES);
            this.stagingAt = this.bytesWritten;
          }
          this.staging.set(bytes, this.staged);
          this.staged += bytes.byteLength;
        } else {
          this.flushStaging();
          this.background.write(this.stream, bytes, this.bytesWritten, false);
        }
        this.bytesWritten += bytes.byteLength;
        return;
      }
      let offset = 0;
      // explicit positions: after a resume the descriptor's own offset is not at the end
      while (offset < bytes.byteLength) offset += writeSync(this.fd, bytes, offset, bytes.byteLength - offset, this.bytesWritten + offset);
    } catch (error) {
      throw this.failure(error);
    }
    this.hash.update(bytes);
    this.bytesWritten += bytes.byteLength;
  }

  /** Flushes what was written so far to disk (a checkpoint); the file stays open. */
  sync(): void {
    if (this.background) {
      this.backgroundCall(() => this.background!.sync(this.stream));
      return;
    }
    try {
      fsyncSync(this.fd);
    } catch (error) {
      throw writeFailure(this.temporaryPath, error);
    }
  }

  /** A write failure named after the file it happened on (the writer thread's may be another layer's). */
  private failure(error: unknown): Error {
    return writeFailure(error instanceof BackgroundWriteError && error.path ? error.path : this.temporaryPath, error);
  }

  private backgroundCall<T>(call: () => T): T {
    try {
      this.flushPending();
      this.flushStaging();
      return call();
    } catch (error) {
      throw this.failure(error);
    }
  }

  // The writer calls close() on its sink when it finishes; the file is closed by commit()/discard().
  override close(): void {}

  /** Flushes to disk, renames to the final name, and returns the file's SHA-256 and size. */
  commit(): { sha256: string; bytes: number } {
    if (this.background) {
      this.backgroundCall(() => this.background!.sync(this.stream));
      const sha256 = this.backgroundCall(() => this.background!.sha256(this.stream)).toString('hex');
      this.background.close(this.stream);
      try {
        closeSync(this.fd);
        this.fd = -1;
        renameSync(this.temporaryPath, this.finalPath);
      } catch (error) {
        throw writeFailure(this.finalPath, error);
      }
      return { sha256, bytes: this.bytesWritten };
    }
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

  /** Closes the temporary file and keeps it (after an error, so that a resume can continue it). */
  suspend(): void {
    this.pending = null;
    this.staging = null;
    if (this.background && this.fd >= 0) this.background.close(this.stream); // nothing may still write to the descriptor once it is closed
    try {
      if (this.fd >= 0) closeSync(this.fd);
    } catch {
      // already closed
    }
    this.fd = -1;
  }

  /** Closes and deletes the temporary file (after an error). */
  discard(): void {
    this.pending = null;
    this.staging = null;
    if (this.background && this.fd >= 0) this.background.close(this.stream);
    try {
      if (this.fd >= 0) closeSync(this.fd);
    } catch {
      // already closed
    }
    this.fd = -1;
    rmSync(this.temporaryPath, { force: true });
  }
}

/** Chunks up to this size are gathered (background mode) rather than sent one by one. */
const STAGED_CHUNK_BYTES = 16 * 1024;
/** Size of one gathering buffer. */
const STAGE_BYTES = 256 * 1024;

/** The fault every sink write consults (tests only; see `injectWriteFault`). */
let writeFault: WriteFault | null = null;

/**
 * Test hook: makes sink writes fail as `fault` decides (disk-full and I/O-error tests); null removes it.
 * Production code never sets it.
 */
export function injectWriteFault(fault: WriteFault | null): void {
  writeFault = fault;
}
