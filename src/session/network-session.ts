/**
 * The only module that imports onnxruntime-node. A thin, typed wrapper: create a session from model
 * bytes, feed float32 tensors, fetch named outputs as Float32Arrays.
 */
import * as ort from 'onnxruntime-node';
import { RuntimeFailure, UsageError } from '../errors.js';

/** A float32 tensor in row-major (C) order. */
export interface FloatTensor {
  data: Float32Array;
  dims: number[];
}

/** Options of `createNetworkSession`. */
export interface NetworkSessionOptions {
  /** Intra-op threads of the runtime; 0 lets the runtime decide. Default 0. */
  threads?: number;
  /** Label for error messages (the model file). */
  label?: string;
}

/** A loaded network ready to run batches. */
export interface NetworkSession {
  readonly inputNames: readonly string[];
  readonly outputNames: readonly string[];
  /**
   * Runs one batch. `fetch` selects outputs (default: all). Resolves with fresh arrays owned by the
   * caller. The runtime computes on its own threads, so the JS thread is free while this is pending.
   */
  run(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, FloatTensor>>;
  /** Releases native resources. */
  close(): Promise<void>;
}

/**
 * Creates a runtime session from ONNX bytes (CPU execution provider, all graph optimisations,
 * sequential execution so results do not depend on scheduling).
 * @throws RuntimeFailure when the runtime rejects the model (the message is the runtime's first line).
 */
export async function createNetworkSession(bytes: Uint8Array, options: NetworkSessionOptions = {}): Promise<NetworkSession> {
  const threads = options.threads ?? 0;
  if (!Number.isInteger(threads) || threads < 0) {
    throw new UsageError('E_THREADS', `--threads must be a non-negative integer, got ${threads}`);
  }
  let session: ort.InferenceSession;
  try {
    session = await ort.InferenceSession.create(bytes, {
      executionProviders: ['cpu'],
      graphOptimizationLevel: 'all',
      executionMode: 'sequential',
      intraOpNumThreads: threads,
      interOpNumThreads: 1,
    });
  } catch (error) {
    throw new RuntimeFailure('E_RUNTIME_LOAD', `the ONNX runtime rejected ${options.label ?? 'the model'}: ${firstLine(error)}`, {
      hint: 'check that the model is valid (onnx.checker) and uses operators the CPU runtime supports',
    });
  }
  return new OrtNetworkSession(session, options.label ?? 'the model');
}

class OrtNetworkSession implements NetworkSession {
  constructor(private readonly session: ort.InferenceSession, private readonly label: string) {}

  get inputNames(): readonly string[] {
    return this.session.inputNames;
  }

  get outputNames(): readonly string[] {
    return this.session.outputNames;
  }

  async run(feeds: Record<string, FloatTensor>, fetch?: readonly string[]): Promise<Record<string, FloatTensor>> {
    const ortFeeds: Record<string, ort.Tensor> = {};
    for (const [name, tensor] of Object.entries(feeds)) ortFeeds[name] = new ort.Tensor('float32', tensor.data, tensor.dims);
    let results: ort.InferenceSession.OnnxValueMapType;
    try {
      results = fetch ? await this.session.run(ortFeeds, fetch as string[]) : await this.session.run(ortFeeds);
    } catch (error) {
      throw new RuntimeFailure('E_RUNTIME_RUN', `running ${this.label} failed: ${firstLine(error)}`);
    }
    const out: Record<string, FloatTensor> = {};
    for (const [name, value] of Object.entries(results)) {
      const tensor = value as ort.Tensor;
      if (tensor.type !== 'float32') {
        throw new RuntimeFailure('E_RUNTIME_DTYPE', `${this.label}: output "${name}" is ${tensor.type}; Sonde records float32 tensors only`);
      }
      out[name] = { data: tensor.data as Float32Array, dims: tensor.dims.slice() };
    }
    return out;
  }

  async close(): Promise<void> {
    await this.session.release();
  }
}

/**
 * Runs the model once and returns every output's element type and dims, whatever its type
 * (probe runs need to see non-float tensors to exclude them).
 */
export async function probeOutputs(
  bytes: Uint8Array,
  feeds: Record<string, FloatTensor>,
  label: string,
): Promise<Map<string, { type: string; dims: number[] }>> {
  let session: ort.InferenceSession;
  try {
    session = await ort.InferenceSession.create(bytes, { executionProviders: ['cpu'], graphOptimizationLevel: 'basic', intraOpNumThreads: 1 });
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

function firstLine(error: unknown): string {
  const message = error instanceof Error ? error.message : String(error);
  return message.split('\n')[0]!.trim();
}
