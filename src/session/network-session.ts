/**
 * The only module that imports onnxruntime-node. A thin, typed wrapper: create a session from model
 * bytes, feed float32 tensors, fetch named outputs as Float32Arrays.
 */
import { createRequire } from 'node:module';
import { availableParallelism } from 'node:os';
import { Worker } from 'node:worker_threads';
import * as ort from 'onnxruntime-node';
import { unchanged, type FileIdentity } from '../disk/file-identity.js';
import { RuntimeFailure, UsageError } from '../errors.js';

/** A float32 tensor in row-major (C) order. */
export interface FloatTensor {
  data: Float32Array;
  dims: number[];
}

/** An output as the runtime stores it: float32 values, or float16 bit patterns (IEEE 754 binary16) for float16 outputs. */
export interface StoredTensor {
  data: Float32Array | Uint16Array;
  dims: number[];
}

/** Options of `createNetworkSession`. */
export interface NetworkSessionOptions {
  /** Intra-op threads of the runtime; 0 lets the runtime decide. Default 0. */
  threads?: number;
  /** Label for error messages (the model file). */
  label?: string;
  /** Run the session in a worker thread (default true), so the caller's thread stays free while it computes. */
  inWorker?: boolean;
  /**
   * Let the runtime's intra-op threads spin while they wait for work (default true, the runtime's own
   * default). False parks them instead, which leaves the cores to other threads of the process — the
   * recording's channel means and its writer thread — when there are few cores.
   */
  spinning?: boolean;
  /**
   * The caller gives up the model bytes' whole ArrayBuffer (it must be the caller's alone: every other
   * view of it is detached): it moves to the worker thread instead of being copied, so a large model
   * is not held twice while the runtime loads it, and is freed once the runtime has read it. A
   * SharedArrayBuffer is copied as usual.
   */
  giveBytes?: boolean;
}

/**
 * ONNX bytes for the runtime whose large weights may be stored by reference: TensorProto external-data
 * entries (a location relative to `weights.folder`, an offset and a length) into files the runtime
 * reads itself while it builds the session, instead of being handed a copy of them
 * (graph/weights-by-reference.ts). Plain bytes are a model that holds all its weights.
 */
export interface RuntimeModel {
  bytes: Uint8Array;
  /** The folder external-data locations are relative to, and the identity of every file they name as Sonde read it. */
  weights?: { folder: string; files: readonly FileIdentity[] };
}

/** A loaded network ready to run batches. */
export interface NetworkSession {
  readonly inputNames: readonly string[];
  readonly outputNames: readonly string[];
  /**
   * Runs one batch. `fetch` selects outputs (default: all). Resolves with fresh arrays owned by the
   * caller; the input arrays stay the caller's (they are copied).
   */
  run(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, FloatTensor>>;
  /** As `run`, but float16 outputs are allowed too and come back as their bit patterns (Uint16Array). */
  runStored(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, StoredTensor>>;
  /** Releases native resources. */
  close(): Promise<void>;
}

/**
 * Creates a runtime session from ONNX bytes (CPU execution provider, all graph optimisations,
 * sequential execution so results do not depend on scheduling). By default the session lives in a
 * worker thread: onnxruntime-node's `run` blocks the thread it is called on, so a session on the main
 * thread would leave no room to read and write while the network computes. Outputs come back as
 * transferred buffers (no copy); inputs are copied, so callers may reuse them.
 * @throws RuntimeFailure when the runtime rejects the model (the message is the runtime's first line).
 */
export async function createNetworkSession(model: Uint8Array | RuntimeModel, options: NetworkSessionOptions = {}): Promise<NetworkSession> {
  const threads = options.threads ?? 0;
  if (!Number.isInteger(threads) || threads < 0) {
    throw new UsageError('E_THREADS', `--threads must be a non-negative integer, got ${threads}`);
  }
  const { bytes, weights } = model instanceof Uint8Array ? { bytes: model, weights: undefined } : model;
  const config: Record<string, unknown> = {};
  if (options.spinning === false) config['intra_op'] = { allow_spinning: '0' };
  // onnxruntime's session config key for external data of a model given as bytes (onnxruntime_session_options_config_keys.h)
  if (weights) config['model_external_initializers_file_folder_path'] = weights.folder;
  const sessionOptions: ort.InferenceSession.SessionOptions = {
    executionProviders: ['cpu'],
    graphOptimizationLevel: 'all',
    executionMode: 'sequential',
    intraOpNumThreads: threads,
    interOpNumThreads: 1,
    ...(Object.keys(config).length > 0 ? { extra: { session: config } } : {}),
    logSeverityLevel: runtimeLogSeverity(),
  };
  const label = options.label ?? 'the model';
  if (weights) assertWeightsUnchanged(weights.files, label, 'before');
  let created: NetworkSession;
  if (options.inWorker === false) {
    let session: ort.InferenceSession;
    try {
      session = await ort.InferenceSession.create(bytes, sessionOptions);
    } catch (error) {
      throw rejected(label, error);
    }
    created = new OrtNetworkSession(session, label);
  } else {
    created = await WorkerNetworkSession.create(bytes, sessionOptions, label, options.giveBytes === true && !(bytes.buffer instanceof SharedArrayBuffer));
  }
  if (weights) {
    try {
      assertWeightsUnchanged(weights.files, label, 'while');
    } catch (error) {
      await created.close();
      throw error;
    }
  }
  return created;
}

/**
 * Throws unless every file the runtime reads weights from is still as Sonde read (and hashed) it, so a
 * session never runs weights other than those a snapshot's manifest names.
 * @throws RuntimeFailure `E_MODEL_CHANGED` naming the file.
 */
function assertWeightsUnchanged(files: readonly FileIdentity[], label: string, when: 'before' | 'while'): void {
  for (const file of files) {
    if (unchanged(file)) continue;
    const how = when === 'before' ? 'since Sonde read it' : 'while the runtime read its weights';
    throw new RuntimeFailure('E_MODEL_CHANGED', `${file.path} (weights of ${label}) changed ${how}`, { hint: 'leave the model file as it is while a command runs, and run the command again' });
  }
}

/** The runtime's log severities by name (onnxruntime: 0 verbose, 1 info, 2 warning, 3 error, 4 fatal). */
const RUNTIME_LOG_LEVELS = { verbose: 0, info: 1, warning: 2, error: 3, fatal: 4 } as const;

/**
 * Severity below which the runtime's own log lines are dropped: `fatal` (4) unless the environment
 * variable SONDE_RUNTIME_LOG names another level. The runtime writes its log natively to stderr in its
 * own multi-line, coloured format (e.g. "Removing initializer …" for the unused weights of an extracted
 * part, or an error line before it throws on a model it rejects); Sonde reports everything a user must
 * act on itself, in its one-line style, and runtime errors arrive as exceptions that become such a
 * line — so by default none of the runtime's own lines print (SONDE_RUNTIME_LOG=error shows them).
 * @throws UsageError for an unknown SONDE_RUNTIME_LOG value.
 */
export function runtimeLogSeverity(): 0 | 1 | 2 | 3 | 4 {
  const name = process.env['SONDE_RUNTIME_LOG'];
  if (name === undefined || name === '') return RUNTIME_LOG_LEVELS.fatal;
  if (!Object.hasOwn(RUNTIME_LOG_LEVELS, name)) throw new UsageError('E_RUNTIME_LOG', `SONDE_RUNTIME_LOG=${JSON.stringify(name)} is not a runtime log level`, { hint: `use ${Object.keys(RUNTIME_LOG_LEVELS).join(', ')}` });
  return RUNTIME_LOG_LEVELS[name as keyof typeof RUNTIME_LOG_LEVELS];
}

function rejected(label: string, error: unknown): RuntimeFailure {
  return new RuntimeFailure('E_RUNTIME_LOAD', `the ONNX runtime rejected ${label}: ${firstLine(error)}`, {
    hint: 'check that the model is valid (onnx.checker) and uses operators the CPU runtime supports',
  });
}

class OrtNetworkSession implements NetworkSession {
  /** Runs not yet settled; `close` waits for them (releasing a session during its run fails the run). */
  private readonly inFlight = new Set<Promise<unknown>>();

  constructor(private readonly session: ort.InferenceSession, private readonly label: string) {}

  get inputNames(): readonly string[] {
    return this.session.inputNames;
  }

  get outputNames(): readonly string[] {
    return this.session.outputNames;
  }

  async run(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, FloatTensor>> {
    return (await this.invoke(feeds, fetch, false)) as Record<string, FloatTensor>;
  }

  runStored(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, StoredTensor>> {
    return this.invoke(feeds, fetch, true);
  }

  private async invoke(feeds: Record<string, FloatTensor>, fetch: readonly string[] | undefined, half: boolean): Promise<Record<string, StoredTensor>> {
    const ortFeeds: Record<string, ort.Tensor> = {};
    for (const [name, tensor] of Object.entries(feeds)) ortFeeds[name] = new ort.Tensor('float32', tensor.data, tensor.dims);
    let results: ort.InferenceSession.OnnxValueMapType;
    const running = fetch ? this.session.run(ortFeeds, fetch as string[]) : this.session.run(ortFeeds);
    this.inFlight.add(running);
    try {
      results = await running;
    } catch (error) {
      throw new RuntimeFailure('E_RUNTIME_RUN', `running ${this.label} failed: ${firstLine(error)}`);
    } finally {
      this.inFlight.delete(running);
    }
    const out: Record<string, StoredTensor> = {};
    for (const [name, value] of Object.entries(results)) {
      const tensor = value as ort.Tensor;
      if (tensor.type !== 'float32' && !(half && tensor.type === 'float16')) {
        throw new RuntimeFailure('E_RUNTIME_DTYPE', `${this.label}: output "${name}" is ${tensor.type}; Sonde records float32 tensors only`);
      }
      out[name] = { data: tensor.data as Float32Array | Uint16Array, dims: tensor.dims.slice() };
    }
    return out;
  }

  async close(): Promise<void> {
    await Promise.allSettled([...this.inFlight]);
    await this.session.release();
  }
}

// The worker is plain CommonJS evaluated from a string, so it runs the same from compiled code and
// from TypeScript sources under the test runner; it loads onnxruntime-node from the path resolved here.
const WORKER_SOURCE = `
const { parentPort, workerData } = require('node:worker_threads');
const ort = require(workerData.ortPath);
let session = null;
const first = (e) => String(e && e.message ? e.message : e).split('\\n')[0].trim();
// one message at a time: a 'close' that arrives while a run is in flight waits for it (releasing a
// session inside its own run aborts the process natively)
let queue = Promise.resolve();
parentPort.on('message', (m) => {
  queue = queue.then(() => handle(m));
});
async function handle(m) {
  try {
    if (m.type === 'create') {
      session = await ort.InferenceSession.create(m.bytes, m.options);
      parentPort.postMessage({ id: m.id, inputNames: session.inputNames, outputNames: session.outputNames });
    } else if (m.type === 'run') {
      const feeds = {};
      for (const name of Object.keys(m.feeds)) feeds[name] = new ort.Tensor('float32', m.feeds[name].data, m.feeds[name].dims);
      const results = m.fetch ? await session.run(feeds, m.fetch) : await session.run(feeds);
      const out = {};
      const transfer = [];
      for (const name of Object.keys(results)) {
        const t = results[name];
        if (t.type !== 'float32' && !(m.half && t.type === 'float16')) throw new Error('output "' + name + '" is ' + t.type + '; Sonde records float32 tensors only');
        out[name] = { data: t.data, dims: t.dims.slice() };
        if (!transfer.includes(t.data.buffer)) transfer.push(t.data.buffer);
      }
      parentPort.postMessage({ id: m.id, out }, transfer);
    } else if (m.type === 'close') {
      if (session) await session.release();
      session = null;
      parentPort.postMessage({ id: m.id });
    }
  } catch (e) {
    parentPort.postMessage({ id: m.id, error: first(e) });
  }
}
`;

interface WorkerReply {
  id: number;
  error?: string;
  out?: Record<string, StoredTensor>;
  inputNames?: string[];
  outputNames?: string[];
}

class WorkerNetworkSession implements NetworkSession {
  private nextId = 1;
  private readonly pending = new Map<number, { resolve: (reply: WorkerReply) => void; reject: (error: Error) => void }>();
  inputNames: readonly string[] = [];
  outputNames: readonly string[] = [];

  private constructor(private readonly worker: Worker, private readonly label: string) {
    worker.on('message', (reply: WorkerReply) => {
      const waiter = this.pending.get(reply.id);
      if (!waiter) return;
      this.pending.delete(reply.id);
      waiter.resolve(reply);
    });
    worker.on('error', (error) => this.failAll(new RuntimeFailure('E_RUNTIME_WORKER', `the runtime worker for ${label} failed: ${firstLine(error)}`)));
    worker.on('exit', (code) => {
      if (this.pending.size > 0) this.failAll(new RuntimeFailure('E_RUNTIME_WORKER', `the runtime worker for ${label} exited (code ${code})`));
    });
  }

  static async create(bytes: Uint8Array, options: ort.InferenceSession.SessionOptions, label: string, give = false): Promise<WorkerNetworkSession> {
    // the source is CommonJS: drop an inherited --input-type=module (node -e with ES modules), which would make it ESM
    const execArgv = process.execArgv.filter((arg) => !arg.startsWith('--input-type'));
    const worker = new Worker(WORKER_SOURCE, { eval: true, execArgv, workerData: { ortPath: ORT_PATH } });
    worker.unref();
    const session = new WorkerNetworkSession(worker, label);
    const reply = await session.call({ type: 'create', bytes, options }, give ? [bytes.buffer as ArrayBuffer] : []);
    if (reply.error) {
      await worker.terminate();
      throw rejected(label, reply.error);
    }
    session.inputNames = reply.inputNames ?? [];
    session.outputNames = reply.outputNames ?? [];
    return session;
  }

  private failAll(error: Error): void {
    for (const waiter of this.pending.values()) waiter.reject(error);
    this.pending.clear();
  }

  private call(message: Record<string, unknown>, transfer: ArrayBuffer[] = []): Promise<WorkerReply> {
    const id = this.nextId++;
    return new Promise((resolve, reject) => {
      this.pending.set(id, { resolve, reject });
      this.worker.ref();
      this.worker.postMessage({ ...message, id }, transfer);
    }).finally(() => {
      if (this.pending.size === 0) this.worker.unref();
    }) as Promise<WorkerReply>;
  }

  async run(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, FloatTensor>> {
    return (await this.invoke(feeds, fetch, false)) as Record<string, FloatTensor>;
  }

  runStored(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, StoredTensor>> {
    return this.invoke(feeds, fetch, true);
  }

  private async invoke(feeds: Record<string, FloatTensor>, fetch: readonly string[] | undefined, half: boolean): Promise<Record<string, StoredTensor>> {
    const reply = await this.call({ type: 'run', feeds, fetch: fetch ? [...fetch] : undefined, half });
    if (reply.error) throw new RuntimeFailure('E_RUNTIME_RUN', `running ${this.label} failed: ${reply.error}`);
    return reply.out!;
  }

  async close(): Promise<void> {
    try {
      await this.call({ type: 'close' });
    } finally {
      await this.worker.terminate();
    }
  }
}

const ORT_PATH = createRequire(import.meta.url).resolve('onnxruntime-node');

/** Intra-op threads of a probe session: the cores this process may use, at most 4 (probes are short runs at batch 2). */
const PROBE_THREADS = Math.min(4, availableParallelism());

/** Bytes per element of the runtime's tensor types (strings and unknown types count 8). */
export const ELEMENT_BYTES: Readonly<Record<string, number>> = { float32: 4, float16: 2, float64: 8, int64: 8, uint64: 8, int32: 4, uint32: 4, int16: 2, uint16: 2, int8: 1, uint8: 1, bool: 1 };

/**
 * Runs the model once and returns every output's element type and dims, whatever its type (probe runs
 * need to see non-float tensors to exclude them). The runtime keeps every output of a run allocated
 * until the run ends, so the caller bounds the memory by what it exposes (`probeTensors` in
 * src/record/ exposes a slice of the tensors per call).
 */
export async function probeOutputs(
  bytes: Uint8Array | null,
  feeds: Record<string, FloatTensor>,
  label: string,
): Promise<Map<string, { type: string; dims: number[] }>> {
  const logSeverityLevel = runtimeLogSeverity();
  let session: ort.InferenceSession;
  try {
    session = await ort.InferenceSession.create(bytes!, { executionProviders: ['cpu'], graphOptimizationLevel: 'basic', intraOpNumThreads: PROBE_THREADS, extra: { session: { intra_op: { allow_spinning: '0' } } }, logSeverityLevel });
    // the runtime holds its own copy now: let the model bytes go before the runs (a large model is not held twice)
    bytes = null;
  } catch (error) {
    throw new RuntimeFailure('E_RUNTIME_LOAD', `the ONNX runtime rejected ${label}: ${firstLine(error)}`, {
      hint: 'check that the model is valid (onnx.checker) and uses operators the CPU runtime supports',
    });
  }
  try {
    const ortFeeds: Record<string, ort.Tensor> = {};
    for (const [name, tensor] of Object.entries(feeds)) ortFeeds[name] = new ort.Tensor('float32', tensor.data, tensor.dims);
    let results: ort.InferenceSession.OnnxValueMapType;
    try {
      results = await session.run(ortFeeds);
    } catch (error) {
      throw new RuntimeFailure('E_RUNTIME_RUN', `probe run of ${label} failed: ${firstLine(error)}`, {
        hint: 'the input shape may not fit the model; pass --input-shape',
      });
    }
    const shapes = new Map<string, { type: string; dims: number[] }>();
    for (const [name, value] of Object.entries(results)) {
      const tensor = value as ort.Tensor;
      shapes.set(name, { type: tensor.type, dims: tensor.dims.slice() });
    }
    return shapes;
  } finally {
    await session.release();
  }
}

/**
 * The element type and dims the runtime's shape inference gives every output of `bytes` (a model with
 * the wanted tensors exposed as outputs), without running it: a session created with no graph
 * optimisation, whose output metadata holds what inference found. Dims it could not fix stay symbolic
 * (the input's batch name, or a name the runtime made up); `fixedDims` sets named free dims of the
 * input (e.g. a dynamic height) before inference. Non-tensor outputs are left out.
 * @throws RuntimeFailure E_RUNTIME_LOAD when the runtime refuses the model.
 */
export async function inferOutputShapes(bytes: Uint8Array, label: string, fixedDims: Record<string, number> = {}): Promise<Map<string, { type: string; dims: Array<number | string> }>> {
  let session: ort.InferenceSession;
  try {
    session = await ort.InferenceSession.create(bytes, { executionProviders: ['cpu'], graphOptimizationLevel: 'disabled', freeDimensionOverrides: fixedDims, intraOpNumThreads: 1, logSeverityLevel: runtimeLogSeverity() });
  } catch (error) {
    throw new RuntimeFailure('E_RUNTIME_LOAD', `the ONNX runtime rejected ${label}: ${firstLine(error)}`, {
      hint: 'check that the model is valid (onnx.checker) and uses operators the CPU runtime supports',
    });
  }
  try {
    const shapes = new Map<string, { type: string; dims: Array<number | string> }>();
    for (const meta of session.outputMetadata) if (meta.isTensor) shapes.set(meta.name, { type: meta.type, dims: meta.shape.slice() });
    return shapes;
  } finally {
    await session.release();
  }
}

function firstLine(error: unknown): string {
  const message = error instanceof Error ? error.message : String(error);
  return message.split('\n')[0]!.trim();
}
