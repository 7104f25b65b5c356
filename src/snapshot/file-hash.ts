/**
 * SHA-256 of whole files, computed off the main thread. A reader verifies a layer file against its
 * manifest hash while it streams the same file: the hash runs in a small pool of worker threads (each
 * reads the file itself, sequentially, in 4 MiB chunks), so on a machine with spare cores verifying
 * costs little wall time; the caller awaits the result before it hands out the file's last batch.
 *
 * Workers are created on first use, reused, and unreferenced while idle so that they never keep the
 * process alive.
 */
import { availableParallelism } from 'node:os';
import { Worker } from 'node:worker_threads';

// plain CommonJS evaluated from a string, so it runs the same from compiled code and from sources
const WORKER_SOURCE = `
const { parentPort } = require('node:worker_threads');
const { createHash } = require('node:crypto');
const { openSync, readSync, closeSync } = require('node:fs');
const chunk = new Uint8Array(1 << 22);
parentPort.on('message', (m) => {
  let fd = -1;
  try {
    fd = openSync(m.path, 'r');
    const hash = createHash('sha256');
    let bytes = 0;
    for (;;) {
      const read = readSync(fd, chunk, 0, chunk.length, null);
      if (read <= 0) break;
      hash.update(chunk.subarray(0, read));
      bytes += read;
    }
    parentPort.postMessage({ id: m.id, sha256: hash.digest('hex'), bytes });
  } catch (e) {
    parentPort.postMessage({ id: m.id, error: String(e && e.message ? e.message : e).split('\\n')[0] });
  } finally {
    if (fd >= 0) try { closeSync(fd); } catch {}
  }
});
`;

/** What `hashFileOffThread` resolves to. */
export interface FileHash {
  /** Lower-case hex SHA-256 of the bytes read. */
  sha256: string;
  /** Bytes read (the file's size when it was read). */
  bytes: number;
}

interface Job {
  id: number;
  path: string;
  resolve: (hash: FileHash) => void;
  reject: (error: Error) => void;
}

interface PoolWorker {
  worker: Worker;
  job: Job | null;
}

const workers: PoolWorker[] = [];
const queue: Job[] = [];
let nextId = 1;

/** Workers in the pool: one per spare core, at least 2 (the two sides of a diff), at most 4. */
function poolSize(): number {
  return Math.max(2, Math.min(4, availableParallelism() - 1));
}

/**
 * Hashes the file at `path` in a worker thread.
 * @returns the SHA-256 and the number of bytes read.
 * @throws (rejects with) an Error carrying the file system's message when the file cannot be read, or
 *   when the worker dies.
 */
export function hashFileOffThread(path: string): Promise<FileHash> {
  return new Promise((resolve, reject) => {
    queue.push({ id: nextId++, path, resolve, reject });
    dispatch();
  });
}

function dispatch(): void {
  while (queue.length > 0) {
    let idle = workers.find((w) => w.job === null);
    if (!idle && workers.length < poolSize()) idle = spawn();
    if (!idle) return;
    const job = queue.shift()!;
    idle.job = job;
    idle.worker.ref();
    idle.worker.postMessage({ id: job.id, path: job.path });
  }
}

function spawn(): PoolWorker {
  // the source is CommonJS: drop an inherited --input-type=module (node -e with ES modules)
  const execArgv = process.execArgv.filter((arg) => !arg.startsWith('--input-type'));
  const worker = new Worker(WORKER_SOURCE, { eval: true, execArgv });
  worker.unref();
  const entry: PoolWorker = { worker, job: null };
  worker.on('message', (reply: { id: number; sha256?: string; bytes?: number; error?: string }) => {
    const job = entry.job;
    entry.job = null;
    worker.unref();
    if (job && job.id === reply.id) {
      if (reply.error !== undefined) job.reject(new Error(reply.error));
      else job.resolve({ sha256: reply.sha256!, bytes: reply.bytes! });
    }
    dispatch();
  });
  const fail = (error: Error) => {
    const index = workers.indexOf(entry);
    if (index >= 0) workers.splice(index, 1);
    const job = entry.job;
    entry.job = null;
    job?.reject(error);
    dispatch();
  };
  worker.on('error', (error) => fail(error));
  worker.on('exit', (code) => fail(new Error(`the hashing worker exited (code ${code})`)));
  workers.push(entry);
  return entry;
}
