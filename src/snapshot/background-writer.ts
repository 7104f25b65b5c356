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
 */
import { Worker } from 'node:worker_threads';
import { writeFailure } from '../disk/write-failure.js';

/** Bytes that may wait in the queue before `write` blocks: enough to cover one batch being written while the next is computed. */
export const DEFAULT_QUEUED_BYTES = 128 * 2 ** 20;

// Plain CommonJS evaluated from a string, so it runs the same from compiled code and under the test runner.
const WORKER_SOURCE = `
const { parentPort, workerData } = require('node:worker_threads');
const { writeSync, fsyncSync, readSync, fsync } = require('node:fs');
const { createHash } = require('node:crypto');
const state = new Int32Array(workerData.state);
const digest = new Uint8Array(workerData.digest);
const errorText = new Uint8Array(workerData.error);
const streams = new Map();
let failed = false;
function fail(e, stream) {
  failed = true;
  const text = JSON.stringify({ stream, code: e && e.code ? String(e.code) : null, message: String(e && e.message ? e.message : e).split('\\n')[0] });
  const bytes = Buffer.from(text.slice(0, 900), 'utf8');
  errorText.fill(0);
  errorText.set(bytes.subarray(0, errorText.length));
  Atomics.store(state, 1, 1);
}
// fsync of every open file at once: the file system can commit them together
function syncAll() {
  return Promise.all([...streams.entries()].map(([id, s]) => new Promise((resolve, reject) => fsync(s.fd, (e) => (e ? reject(Object.assign(e, { stream: id })) : resolve())))));
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
function handle(m) {
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
      streams.set(m.stream, { fd: m.fd, hash });
    } else if (m.type === 'write') {
      if (!failed) {
        const s = streams.get(m.stream);
        const bytes = new Uint8Array(m.buffer, m.offset, m.length);
        let off = 0;
        while (off < bytes.length) off += writeSync(s.fd, bytes, off, bytes.length - off, m.position + off);
        s.hash.update(bytes);
      }
    } else if (m.type === 'sync') {
      if (!failed) fsyncSync(streams.get(m.stream).fd);
    } else if (m.type === 'digest') {
      const s = streams.get(m.stream);
      digest.set(s.hash.copy().digest());
    } else if (m.type === 'close') {
      streams.delete(m.stream);
    } else if (m.type === 'checkpoint') {
      // the hashes now, in the order of the writes; the fsyncs run beside the writes that follow
      const open = [...streams.entries()].filter(([, s]) => !failed && s);
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
  private readonly state = new Int32Array(new SharedArrayBuffer(8));
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

  /** @param maxQueuedBytes bytes that may wait before `write` blocks (default `DEFAULT_QUEUED_BYTES`). */
  constructor(readonly maxQueuedBytes = DEFAULT_QUEUED_BYTES) {
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
   * a new file); the worker hashes that prefix again before anything is appended.
   * @returns the stream's id for the other calls.
   */
  open(fd: number, path: string, prefix = 0, flush?: () => void): number {
    const stream = this.nextStream++;
    this.paths.set(stream, path);
    this.lengths.set(stream, prefix);
    if (flush) this.flushers.set(stream, flush);
    this.post({ type: 'open', stream, fd, prefix }, 0);
    return stream;
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
