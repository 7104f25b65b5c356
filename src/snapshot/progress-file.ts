/**
 * Checkpoints of a recording in progress, so that `record --resume` can continue it after a crash.
 *
 * While a recording runs its folder holds, besides `manifest.json` (complete: false) and the layer files
 * under their `.partial` names:
 * - `stimuli.digests.partial`: the 32-byte SHA-256 of each stimulus's input bytes, appended per batch;
 * - `progress.json`: the last checkpoint — batches and stimuli done, and the byte length and SHA-256 of
 *   every partial file (layer files and the digest log) after exactly those batches.
 *
 * A checkpoint is taken after a batch has been written to every file: all files are fsynced first and
 * `progress.json` is then replaced atomically (temporary file, fsync, rename), so it never names bytes
 * that are not on disk. On resume every partial file's first bytes up to its checkpoint length must still
 * have the checkpoint's SHA-256 (else the resume is refused: a damaged or replaced partial file would
 * end up inside a "complete" snapshot), and the stimuli already recorded must still have the digests in
 * the log (checked by the recorder); each file is then truncated to its checkpoint length and writing
 * continues with the next batch; what was written after the checkpoint is simply written again.
 */
import { closeSync, existsSync, fstatSync, fsyncSync, ftruncateSync, openSync, readSync, rmSync, writeSync } from 'node:fs';
import { INPUT_LIMITS, readInputText } from '../disk/input-file.js';
import { createHash } from 'node:crypto';
import { join } from 'node:path';
import { RuntimeFailure } from '../errors.js';
import { writeFailure } from '../disk/write-failure.js';
import { replaceFile } from '../disk/atomic-file.js';
import { STIMULUS_DIGEST_BYTES } from './stimuli-file.js';

/** Name of the checkpoint file in a snapshot folder being written. */
export const PROGRESS_FILE = 'progress.json';
/** Name of the per-stimulus digest log in a snapshot folder being written. */
export const DIGEST_LOG_FILE = 'stimuli.digests.partial';

/** One checkpoint. */
export interface ProgressRecord {
  /** Version of this file's layout. */
  format: 1;
  /** Batches complete in every file. */
  batches: number;
  /** Stimuli those batches hold. */
  stimuli: number;
  /** Byte length of each layer file (manifest `file` → bytes of its `.partial`) at the checkpoint. */
  files: Record<string, number>;
  /** NaN/±Infinity counts so far per layer file and `stimuli` (see non-finite.ts); absent in older checkpoints. */
  nonFinite?: Record<string, number>;
  /**
   * SHA-256 (hex) of each layer file's first `files[file]` bytes; absent in checkpoints of older
   * versions (which cannot be resumed: their partial files cannot be verified).
   */
  sha256?: Record<string, string>;
  /** SHA-256 (hex) of the digest log's bytes at the checkpoint (record without a baseline only). */
  digestsSha256?: string;
}

/**
 * Reads `progress.json` of a folder.
 * @returns the checkpoint, or null when there is none (the recording never reached one).
 * @throws RuntimeFailure when the file exists but is not a valid checkpoint.
 */
export function readProgress(folder: string): ProgressRecord | null {
  const path = join(folder, PROGRESS_FILE);
  if (!existsSync(path)) return null;
  let value: unknown;
  try {
    value = JSON.parse(readInputText(path, path, INPUT_LIMITS.json));
  } catch (error) {
    throw new RuntimeFailure('E_RESUME', `${path} is not valid JSON (${(error as Error).message})`, { hint: 'record again without --resume' });
  }
  const v = (typeof value === 'object' && value !== null ? value : {}) as Record<string, unknown>;
  const files = v['files'];
  const count = (x: unknown) => Number.isSafeInteger(x) && (x as number) >= 0;
  const hex = (x: unknown) => typeof x === 'string' && /^[0-9a-f]{64}$/.test(x);
  const hashes = v['sha256'];
  const hashesBad = hashes !== undefined && (typeof hashes !== 'object' || hashes === null || !Object.values(hashes).every(hex));
  if (v['format'] !== 1 || !count(v['batches']) || !count(v['stimuli']) || typeof files !== 'object' || files === null || !Object.values(files).every(count) || hashesBad || (v['digestsSha256'] !== undefined && !hex(v['digestsSha256']))) {
    throw new RuntimeFailure('E_RESUME', `${path} is not a checkpoint this Sonde understands`, { hint: 'record again without --resume' });
  }
  return value as ProgressRecord;
}

/**
 * The SHA-256 a checkpoint recorded for a partial file, for resuming it.
 * @throws RuntimeFailure when the checkpoint has none (written by an older version of Sonde).
 */
export function checkpointSha256(folder: string, progress: ProgressRecord, file: string): string {
  const hash = progress.sha256?.[file];
  if (hash === undefined) {
    throw new RuntimeFailure('E_RESUME', `${join(folder, PROGRESS_FILE)} records no SHA-256 for ${file}, so the partial file cannot be verified (checkpoint of an older Sonde?)`, {
      hint: 'record again without --resume (into a new folder, or with --force)',
    });
  }
  return hash;
}

/**
 * Replaces `progress.json` atomically.
 * @throws RuntimeFailure when it cannot be written (e.g. the disk is full).
 */
export function writeProgress(folder: string, progress: ProgressRecord): void {
  replaceFile(join(folder, PROGRESS_FILE), `${JSON.stringify(progress)}\n`);
}

/** Removes the checkpoint files of a folder (after completion, or before a fresh start). */
export function removeProgress(folder: string): void {
  for (const name of [PROGRESS_FILE, `${PROGRESS_FILE}.partial`, DIGEST_LOG_FILE]) rmSync(join(folder, name), { force: true });
}

/**
 * The per-stimulus digests of a recording: kept in memory (for `stimuli.arrow` and the stimuli digest)
 * and appended to `stimuli.digests.partial` (for resuming).
 */
export class DigestLog {
  /** rows × 32 bytes, filled in stimulus order. */
  readonly digests: Uint8Array;
  private fd: number;
  private written: number;
  private readonly path: string;

  /**
   * @param folder the snapshot folder.
   * @param rows stimuli the recording will hold.
   * @param resumeRows stimuli already done at the checkpoint (their digests are read back); 0 starts a
   *   new log.
   * @param resumeSha256 the SHA-256 the log's first `resumeRows` digests had at the checkpoint.
   * @throws RuntimeFailure when the log cannot be created, holds fewer digests than `resumeRows`, or
   *   they do not have `resumeSha256`.
   */
  constructor(folder: string, rows: number, resumeRows = 0, resumeSha256?: string) {
    this.path = join(folder, DIGEST_LOG_FILE);
    this.digests = new Uint8Array(rows * STIMULUS_DIGEST_BYTES);
    const keep = resumeRows * STIMULUS_DIGEST_BYTES;
    try {
      this.fd = openSync(this.path, resumeRows > 0 ? 'r+' : 'w');
    } catch (error) {
      if (resumeRows > 0) throw new RuntimeFailure('E_RESUME', `cannot resume: ${this.path} is missing`, { hint: 'record again without --resume' });
      throw writeFailure(this.path, error);
    }
    if (resumeRows > 0) {
      const size = fstatSync(this.fd).size;
      if (size < keep || readSync(this.fd, this.digests, 0, keep, 0) !== keep) {
        closeSync(this.fd);
        throw new RuntimeFailure('E_RESUME', `cannot resume: ${this.path} holds ${Math.floor(size / STIMULUS_DIGEST_BYTES)} digests, the checkpoint needs ${resumeRows}`, { hint: 'record again without --resume' });
      }
      if (resumeSha256 !== undefined && createHash('sha256').update(this.digests.subarray(0, keep)).digest('hex') !== resumeSha256) {
        closeSync(this.fd);
        throw new RuntimeFailure('E_RESUME', `cannot resume: ${this.path} changed since the checkpoint (SHA-256 differs from progress.json)`, { hint: 'record again without --resume (into a new folder, or with --force)' });
      }
      ftruncateSync(this.fd, keep);
    }
    this.written = keep;
  }

  /** SHA-256 (hex) of the digests in the log file. */
  sha256(): string {
    return createHash('sha256').update(this.digests.subarray(0, this.written)).digest('hex');
  }

  /** Bytes in the log file. */
  get byteLength(): number {
    return this.written;
  }

  /**
   * Appends the digests of local rows [from, from + rows) to the log file (they must already be in
   * `digests`, and follow the rows written before).
   * @throws RuntimeFailure when the write fails.
   */
  append(from: number, rows: number): void {
    const start = from * STIMULUS_DIGEST_BYTES;
    if (start !== this.written) throw new RuntimeFailure('E_WRITE', `${this.path}: digests must be appended in order (at ${start}, expected ${this.written})`);
    const end = start + rows * STIMULUS_DIGEST_BYTES;
    try {
      let at = start;
      while (at < end) at += writeSync(this.fd, this.digests, at, end - at, at);
    } catch (error) {
      throw writeFailure(this.path, error);
    }
    this.written = end;
  }

  /** fsyncs the log. */
  sync(): void {
    try {
      fsyncSync(this.fd);
    } catch (error) {
      throw writeFailure(this.path, error);
    }
  }

  /** Closes the log file (kept on disk). */
  close(): void {
    if (this.fd < 0) return;
    try {
      closeSync(this.fd);
    } catch {
      // already closed
    }
    this.fd = -1;
  }
}
