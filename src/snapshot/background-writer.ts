/**
 * Writing and hashing files on a thread of their own. A recording hands every byte chunk of its layer
 * files to one `BackgroundWriter`; its worker thread writes each chunk at its position (`pwrite`) and
 * feeds the same bytes to that file's SHA-256, so the main thread only computes channel means and
 * encodes Arrow messages while the disk and the hash keep pace beside the network.
 *
 * Chunks whose memory the caller gives up (`transfer`: the runtime's output buffers, float16
 * conversions) move to the worker without a copy; other chunks (Arrow metadata, padding) are copied,
 * which is small. The queue is bounded by bytes: `write` blocks the caller while more than
 * `maxQueuedBytes` wait to be written.
 *
 * Synchronisation uses a SharedArrayBuffer: the worker publishes the sequence number of the last request
 * it finished (and an error, if one happened), and the caller waits on it with `Atomics.wait` at the few
 * points that need a result — a checkpoint's fsync and hash, the end of a file. The API therefore stays
 * synchronous, as the single-threaded sink's is.
 *
 * Files on local disk file systems (disk/write-mode.ts) go to the device with O_DIRECT: the worker
 * stages whole aligned blocks and keeps up to three writes in flight, so the kernel copies nothing into
 * the page cache; a write request then counts as done once its bytes are staged and hashed, and every
 * sync, checkpoint and close first waits for that file's writes in flight.
 */
import { Worker } from 'node:worker_threads';
import { writeFailure } from '../disk/write-failure.js';
import { wantsDirectWrites, type DiskWriteMode } from '../disk/write-mode.js';

/** Bytes that may wait in the queue before `write` blocks: enough to cover one batch being written while the next is computed. */
export const DEFAULT_QUEUED_BYTES = 128 * 2 ** 20;

// Plain CommonJS evaluated from a string, so it runs the same from compiled code and under the test runner.
const WORKER_SOURCE = `
const { parentPort, workerData } = require('node:worker_threads');
const { write, writeSync, fsyncSync, readSync, fsync, openSync, closeSync, ftruncateSync, constants } = require('node:fs');
const { createHash } = require('node:crypto');
const state = new Int32Array(workerData.state);
const digest = new Uint8Array(workerData.digest);
const errorText = new Uint8Array(workerData.error);
const streams = new Map();
let failed = false;
let directStreams = 0;
function fail(e, stream) {
  failed = true;
  const text = JSON.stringify({ stream, code: e && e.code ? String(e.code) : null, message: String(e && e.message ? e.message : e).split('\\n')[0] });
  const bytes = Buffer.from(text.slice(0, 900), 'utf8');
  errorText.fill(0);
  errorText.set(bytes.subarray(0, errorText.length));
  Atomics.store(state, 1, 1);
}
// fsync of every open file at once: the file system can commit them together
async function syncAll() {
  await drainAll();
  for (const s of streams.values()) settle(s);
  return Promise.all([...streams.entries()].map(([id, s]) => new Promise((resolve, reject) => fsync(s.fd, (e) => (e ? reject(Object.assign(e, { stream: id })) : resolve())))));
}
// Direct writes (disk/write-mode.ts): a second descriptor of the file, opened with O_DIRECT, takes whole
// blocks at block-aligned positions from a few aligned stages shared by every stream, written
// asynchronously (the device works while this thread hashes and stages the next bytes; a full set of
// stages in flight makes the next write wait). Each stream keeps only its last part-block (its tail,
// under BLOCK bytes) between writes; the next write sends the tail and the new bytes on together, so
// that block is written again, whole. settle() puts a tail on disk, padded to a block, and truncates the
// file back to its true length; it and every fsync first wait for the stream's writes in flight.
const BLOCK = 4096;
const STAGE_BYTES = 8 << 20;
// three in flight at most: libuv's pool has four threads, and compression shares them
const STAGES = 3;
let pool = null; // { raw, offset }: STAGES aligned stages inside one allocation
const freeStages = [];
const stageWaiters = [];
function stage(i) {
  return pool.raw.subarray(pool.offset + i * STAGE_BYTES, pool.offset + (i + 1) * STAGE_BYTES);
}
function acquireStage() {
  return freeStages.length > 0 ? Promise.resolve(freeStages.pop()) : new Promise((resolve) => stageWaiters.push(resolve));
}
function releaseStage(i) {
  const waiter = stageWaiters.shift();
  if (waiter) waiter(i);
  else freeStages.push(i);
}
function writeAll(fd, bytes, offset, length, position) {
  let done = 0;
  while (done < length) done += writeSync(fd, bytes, offset + done, length - done, position + done);
}
// O_DIRECT wants the memory of a write aligned too (to the device's block or DMA alignment), which
// JavaScript cannot ask for: the first offset into an over-allocated buffer whose write of one block
// the file system accepts is aligned. Each file's probe writes back the file's own bytes of its last
// block (the bytes before prefix), then truncates the file to prefix again.
function openDirect(fd, prefix, id) {
  if (process.platform !== 'linux' || !constants.O_DIRECT) return null;
  let dfd;
  try {
    // an empty write first: opening the file again through /proc must not write where the caller's
    // descriptor may not (that one's refusal is then reported by the first real write)
    writeSync(fd, Buffer.alloc(0), 0, 0, prefix);
    dfd = openSync('/proc/self/fd/' + fd, constants.O_WRONLY | constants.O_DIRECT);
  } catch {
    return null;
  }
  const start = prefix - (prefix % BLOCK);
  const tail = Buffer.alloc(BLOCK);
  let got = 0;
  while (got < prefix - start) {
    const n = readSync(fd, tail, got, prefix - start - got, start + got);
    if (n <= 0) break;
    got += n;
  }
  const raw = pool ? pool.raw : Buffer.allocUnsafeSlow(STAGES * STAGE_BYTES + BLOCK);
  const offsets = pool ? [pool.offset] : Array.from({ length: BLOCK / 16 }, (_, i) => i * 16);
  for (const k of offsets) {
    raw.set(tail, k);
    try {
      writeSync(dfd, raw, k, BLOCK, start);
    } catch (e) {
      if (e && e.code === 'EINVAL') continue;
      break;
    }
    ftruncateSync(fd, prefix);
    if (!pool) {
      pool = { raw, offset: k };
      for (let i = STAGES - 1; i >= 0; i--) freeStages.push(i);
    }
    return { fd: dfd, start, tail, fill: prefix - start, settled: prefix - start, inFlight: 0, drained: [], id };
  }
  closeSync(dfd);
  return null;
}
// the stream's writes in flight are done (their failure, if any, is already recorded)
function drain(s) {
  const d = s.direct;
  if (!d || d.inFlight === 0) return Promise.resolve();
  return new Promise((resolve) => d.drained.push(resolve));
}
function drainAll() {
  return Promise.all([...streams.values()].map(drain));
}
function issue(d, i, length, position) {
  d.inFlight++;
  write(d.fd, stage(i), 0, length, position, (e, written) => {
    try {
      if (!e && written < length) writeAll(d.fd, stage(i), written, length - written, position + written);
    } catch (retry) {
      e = retry;
    }
    releaseStage(i);
    if (e && !failed) fail(e, d.id);
    if (--d.inFlight === 0) for (const resolve of d.drained.splice(0)) resolve();
  });
}
// the stream's tail reaches the file: one block, padded, then the file truncated to its true length
// (after drain: nothing of the stream is in flight)
function settle(s) {
  const d = s.direct;
  if (!d || d.fill === d.settled) return;
  const i = freeStages.pop();
  const S = i === undefined ? null : stage(i);
  try {
    if (S) {
      S.set(d.tail.subarray(0, d.fill), 0);
      S.fill(0, d.fill, BLOCK);
      writeAll(d.fd, S, 0, BLOCK, d.start);
    } else {
      // every stage is another stream's write in flight: this tail goes through the page cache
      writeAll(s.fd, d.tail, d.settled, d.fill - d.settled, d.start + d.settled);
    }
  } finally {
    if (i !== undefined) releaseStage(i);
  }
  ftruncateSync(s.fd, d.start + d.fill);
  d.settled = d.fill;
}
// back to writes through the page cache (a write out of sequence): the tail's unsettled bytes first
// (after drain)
function leaveDirect(s) {
  const d = s.direct;
  s.direct = null;
  try {
    if (d.fill > d.settled) writeAll(s.fd, d.tail, d.settled, d.fill - d.settled, d.start + d.settled);
  } finally {
    closeSync(d.fd);
  }
}
async function writeDirect(s, bytes, position) {
  const d = s.direct;
  if (position !== d.start + d.fill) {
    await drain(s);
    leaveDirect(s);
    writeAll(s.fd, bytes, 0, bytes.length, position);
    return;
  }
  let at = 0;
  // the tail and the new bytes, a stage at a time: whole blocks go to the device, the last part-block
  // becomes the tail
  while (d.fill + (bytes.length - at) >= BLOCK) {
    const i = await acquireStage();
    const S = stage(i);
    S.set(d.tail.subarray(0, d.fill), 0);
    const take = Math.min(bytes.length - at, STAGE_BYTES - d.fill);
    S.set(bytes.subarray(at, at + take), d.fill);
    at += take;
    const n = d.fill + take;
    const whole = n - (n % BLOCK);
    d.tail.set(S.subarray(whole, n), 0);
    const position = d.start;
    d.start += whole;
    d.fill = n - whole;
    d.settled = 0;
    issue(d, i, whole, position);
  }
  d.tail.set(bytes.subarray(at), d.fill);
  d.fill += bytes.length - at;
}
async function closeStream(s) {
  if (!s.direct) return;
  try {
    await drain(s);
    settle(s);
  } finally {
    closeSync(s.direct.fd);
    s.direct = null;
  }
}
let queue = Promise.resolve();
parentPort.on('message', (m) => {
  if (m.type === 'syncAll') {
    queue = queue.then(() => (failed ? undefined : syncAll())).catch((e) => { if (!failed) fail(e, e && e.stream); }).then(() => {
      Atomics.store(state, 0, m.seq);
      Atomics.notify(state, 0);
    });
    return;
  }
  queue = queue.then(() => handle(m));
});
async function handle(m) {
  try {
    if (m.type === 'open') {
      const hash = createHash('sha256');
      const chunk = Buffer.allocUnsafe(1 << 22);
      let at = 0;
      while (at < m.prefix) {
        const n = readSync(m.fd, chunk, 0, Math.min(chunk.length, m.prefix - at), at);
        if (n <= 0) throw new Error('unexpected end of file at byte ' + at);
        hash.update(chunk.subarray(0, n));
        at += n;
      }
      const direct = m.direct ? openDirect(m.fd, m.prefix, m.stream) : null;
      streams.set(m.stream, { fd: m.fd, hash, direct });
      directStreams += direct ? 1 : 0;
      Atomics.store(state, 2, directStreams);
    } else if (m.type === 'write') {
      if (!failed) {
        const s = streams.get(m.stream);
        const bytes = new Uint8Array(m.buffer, m.offset, m.length);
        if (s.direct) await writeDirect(s, bytes, m.position);
        else writeAll(s.fd, bytes, 0, bytes.length, m.position);
        s.hash.update(bytes);
      }
    } else if (m.type === 'sync') {
      if (!failed) {
        const s = streams.get(m.stream);
        await drain(s);
        settle(s);
        fsyncSync(s.fd);
      }
    } else if (m.type === 'digest') {
      const s = streams.get(m.stream);
      digest.set(s.hash.copy().digest());
    } else if (m.type === 'close') {
      const s = streams.get(m.stream);
      streams.delete(m.stream);
      if (s && !failed) await closeStream(s);
      else if (s && s.direct) {
        await drain(s);
        try { closeSync(s.direct.fd); } catch {}
      }
    } else if (m.type === 'checkpoint') {
      // the hashes now, in the order of the writes; the fsyncs run beside the writes that follow
      await drainAll();
      const open = [...streams.entries()].filter(([, s]) => !failed && s);
      for (const [, s] of open) settle(s);
      const sha256 = open.map(([id, s]) => [id, s.hash.copy().digest('hex')]);
      Promise.all(open.map(([id, s]) => new Promise((resolve, reject) => fsync(s.fd, (e) => (e ? reject(Object.assign(e, { stream: id })) : resolve())))))
        .then(() => parentPort.postMessage({ checkpoint: m.id, sha256: failed ? null : sha256 }))
        .catch((e) => { if (!failed) fail(e, e && e.stream); parentPort.postMessage({ checkpoint: m.id, sha256: null }); });
    }
  } catch (e) {
    if (!failed) fail(e, m.stream);
  }
  Atomics.store(state, 0, m.seq);
  Atomics.notify(state, 0);
}
`;

/** The first failure of the worker: the stream it happened on and the error's code and message. */
interface WorkerFailure {
  stream: number;
  code: string | null;
  message: string;
}

/** A write failure reported by the writer thread (carries the errno code, as `writeFailure` expects). */
export class BackgroundWriteError extends Error {
  constructor(readonly code: string | undefined, message: string, readonly path?: string) {
    super(message);
  }
}

/** One worker thread writing and hashing the files of one recording. */
export class BackgroundWriter {
  private readonly worker: Worker;
  private readonly state = new Int32Array(new SharedArrayBuffer(12));
  private readonly digestBytes = new Uint8Array(new SharedArrayBuffer(32));
  private readonly errorBytes = new Uint8Array(new SharedArrayBuffer(1024));
  private seq = 0;
  private nextStream = 1;
  /** Requests in flight with their byte sizes (oldest first) and their total. */
  private readonly queue: Array<{ seq: number; bytes: number }> = [];
  private queuedBytes = 0;
  private closed = false;
  private readonly paths = new Map<number, string>();
  /** Bytes each stream's file will hold once its queued writes are done. */
  private readonly lengths = new Map<number, number>();
  private nextCheckpoint = 1;
  private readonly checkpoints = new Map<number, { resolve: (result: Map<string, { bytes: number; sha256: string }>) => void; reject: (error: Error) => void; lengths: Map<number, number> }>();
  /** Per stream: hands on what its sink still holds back (called before `syncAll`). */
  private readonly flushers = new Map<number, () => void>();

  /**
   * @param maxQueuedBytes bytes that may wait before `write` blocks (default `DEFAULT_QUEUED_BYTES`).
   * @param diskWrites how files reach the disk (default `auto`; disk/write-mode.ts): with O_DIRECT from
   *   an aligned stage of the worker's, or through the page cache.
   */
  constructor(readonly maxQueuedBytes = DEFAULT_QUEUED_BYTES, readonly diskWrites: DiskWriteMode = 'auto') {
    const execArgv = process.execArgv.filter((arg) => !arg.startsWith('--input-type'));
    this.worker = new Worker(WORKER_SOURCE, { eval: true, execArgv, workerData: { state: this.state.buffer, digest: this.digestBytes.buffer, error: this.errorBytes.buffer } });
    this.worker.unref();
    this.worker.on('message', (reply: { checkpoint: number; sha256: Array<[number, string]> | null }) => {
      const waiter = this.checkpoints.get(reply.checkpoint);
      if (!waiter) return;
      this.checkpoints.delete(reply.checkpoint);
      if (this.checkpoints.size === 0) this.worker.unref();
      if (reply.sha256 === null) {
        try {
          this.throwIfFailed();
          waiter.reject(new BackgroundWriteError(undefined, 'the checkpoint failed'));
        } catch (error) {
          waiter.reject(error as Error);
        }
        return;
      }
      const result = new Map<string, { bytes: number; sha256: string }>();
      for (const [stream, sha256] of reply.sha256) {
        const path = this.paths.get(stream);
        if (path !== undefined) result.set(path, { bytes: waiter.lengths.get(stream) ?? 0, sha256 });
      }
      waiter.resolve(result);
    });
    // a worker that dies fails the checkpoints still waiting
    this.worker.on('exit', () => {
      for (const waiter of this.checkpoints.values()) waiter.reject(new BackgroundWriteError(undefined, 'the writer thread stopped'));
      this.checkpoints.clear();
    });
  }

  /**
   * A checkpoint that does not stop the caller: every sink hands on what it holds back, the worker takes
   * each open file's SHA-256 at this point of the writes and fsyncs the files while later writes go on;
   * the promise resolves (per temporary path: bytes and SHA-256 at the checkpoint) once those fsyncs are
   * done, so a progress record written then never points at bytes not yet on disk.
   * @throws (rejects) BackgroundWriteError when a write or fsync failed.
   */
  checkpointAll(): Promise<Map<string, { bytes: number; sha256: string }>> {
    for (const flush of this.flushers.values()) flush();
    this.throwIfFailed();
    const id = this.nextCheckpoint++;
    const lengths = new Map(this.lengths);
    return new Promise((resolve, reject) => {
      this.checkpoints.set(id, { resolve, reject, lengths });
      this.worker.ref();
      this.post({ type: 'checkpoint', id }, 0);
    });
  }

  /**
   * Starts a stream on an open file descriptor (`path` names it in errors; `flush` hands on chunks its
   * sink holds back, before `syncAll`) whose first `prefix` bytes are already in the file (0 for
   * a new file); the worker hashes that prefix again before anything is appended. `writeBytes`, the
   * usual size of one write when known, lets `auto` keep small writers on the page cache.
   * @returns the stream's id for the other calls.
   */
  open(fd: number, path: string, prefix = 0, flush?: () => void, writeBytes?: number): number {
    const stream = this.nextStream++;
    this.paths.set(stream, path);
    this.lengths.set(stream, prefix);
    if (flush) this.flushers.set(stream, flush);
    this.post({ type: 'open', stream, fd, prefix, direct: wantsDirectWrites(path, this.diskWrites, writeBytes) }, 0);
    return stream;
  }

  /** Streams opened so far whose file takes O_DIRECT writes (after the open requests before this call are done). */
  directStreams(): number {
    this.waitFor(this.seq);
    return Atomics.load(this.state, 2);
  }

  /**
   * Queues `bytes` to be written at `position` of `stream` and hashed. With `transfer`, the chunk's
   * whole ArrayBuffer moves to the worker (the caller must not touch it again); otherwise it is copied.
   * Blocks while more than `maxQueuedBytes` are waiting.
   * @throws BackgroundWriteError when an earlier write failed.
   */
  write(stream: number, bytes: Uint8Array, position: number, transfer: boolean): void {
    this.throwIfFailed();
    let buffer: ArrayBuffer;
    let offset: number;
    if (transfer) {
      buffer = bytes.buffer as ArrayBuffer;
      offset = bytes.byteOffset;
    } else {
      buffer = bytes.slice().buffer;
      offset = 0;
    }
    this.lengths.set(stream, Math.max(this.lengths.get(stream) ?? 0, position + bytes.byteLength));
    this.post({ type: 'write', stream, buffer, offset, length: bytes.byteLength, position }, bytes.byteLength, [buffer]);
    while (this.queuedBytes > this.maxQueuedBytes) this.waitFor(this.queue[0]!.seq);
  }

  /** Waits until everything queued for `stream` is written, then fsyncs its file. @throws BackgroundWriteError */
  sync(stream: number): void {
    this.waitFor(this.post({ type: 'sync', stream }, 0));
    this.throwIfFailed();
  }

  /**
   * Waits until everything queued is written, then fsyncs every open stream's file at once (the file
   * system can commit them together, where one fsync after another waits for a commit each).
   * @throws RuntimeFailure E_WRITE naming the file whose write or fsync failed
   */
  syncAll(): void {
    try {
      for (const flush of this.flushers.values()) flush();
      this.waitFor(this.post({ type: 'syncAll' }, 0));
      this.throwIfFailed();
    } catch (error) {
      // worded as every write failure: the file and the reason, in one line
      throw error instanceof BackgroundWriteError ? writeFailure(error.path ?? 'a layer file', error) : error;
    }
  }

  /** SHA-256 of every byte of `stream` so far (its prefix and all writes), after they are written. @throws BackgroundWriteError */
  sha256(stream: number): Buffer {
    this.waitFor(this.post({ type: 'digest', stream }, 0));
    this.throwIfFailed();
    return Buffer.from(this.digestBytes);
  }

  /** Waits for the stream's queued writes and forgets it (the caller closes the descriptor afterwards). Never throws. */
  close(stream: number): void {
    this.flushers.delete(stream);
    this.lengths.delete(stream);
    if (this.closed) return;
    try {
      this.waitFor(this.post({ type: 'close', stream }, 0));
    } catch {
      // a dead worker writes nothing more: the descriptor may be closed
    }
  }

  /** Ends the worker thread (after the streams are closed). */
  async terminate(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    await this.worker.terminate();
  }

  private post(message: Record<string, unknown>, bytes: number, transfer: ArrayBuffer[] = []): number {
    if (this.closed) throw new BackgroundWriteError(undefined, 'the writer thread was already stopped');
    const seq = ++this.seq;
    this.worker.postMessage({ ...message, seq }, transfer);
    this.queue.push({ seq, bytes });
    this.queuedBytes += bytes;
    return seq;
  }

  /** Blocks until the worker has finished request `seq`. @throws BackgroundWriteError when the worker is gone. */
  private waitFor(seq: number): void {
    for (;;) {
      const done = Atomics.load(this.state, 0);
      if (done >= seq) break;
      // a worker that died never publishes again: its thread id turns to -1
      if (this.worker.threadId === -1) throw new BackgroundWriteError(undefined, 'the writer thread stopped');
      Atomics.wait(this.state, 0, done, 200);
    }
    while (this.queue.length > 0 && this.queue[0]!.seq <= seq) this.queuedBytes -= this.queue.shift()!.bytes;
  }

  private throwIfFailed(): void {
    if (Atomics.load(this.state, 1) === 0) return;
    const end = this.errorBytes.indexOf(0);
    const failure = JSON.parse(Buffer.from(this.errorBytes.subarray(0, end < 0 ? undefined : end)).toString('utf8')) as WorkerFailure;
    throw new BackgroundWriteError(failure.code ?? undefined, failure.message, this.paths.get(failure.stream));
  }
}
