/**
 * The graph the runtime actually runs: onnxruntime rewrites a model when it loads it (constant folding,
 * operator fusions such as Conv+Relu or Conv+Add+Relu, blocked memory layouts) and can save the result.
 * Comparing that graph with the model's own tells which tensors the runtime fuses away — tensors that
 * exposing as outputs keeps alive, at the cost of the fusion (see graph/fusions.ts).
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import * as ort from 'onnxruntime-node';
import { RuntimeFailure } from '../errors.js';
import { runtimeLogSeverity } from './network-session.js';

/**
 * ONNX bytes of the graph the CPU runtime builds from `bytes` with every optimisation on (the level
 * sessions use), as the runtime saves it.
 * @throws RuntimeFailure when the runtime rejects the model.
 */
export async function optimizedModel(bytes: Uint8Array, label: string): Promise<Uint8Array> {
  const folder = mkdtempSync(join(tmpdir(), 'sonde-optimized-'));
  try {
    const path = join(folder, 'optimized.onnx');
    let session: ort.InferenceSession;
    try {
      session = await ort.InferenceSession.create(bytes, { executionProviders: ['cpu'], graphOptimizationLevel: 'all', intraOpNumThreads: 1, optimizedModelFilePath: path, logSeverityLevel: runtimeLogSeverity() });
    } catch (error) {
      throw new RuntimeFailure('E_RUNTIME_LOAD', `the ONNX runtime rejected ${label}: ${(error as Error).message.split('\n')[0]}`);
    }
    await session.release();
    return readFileSync(path);
  } finally {
    rmSync(folder, { recursive: true, force: true });
  }
}
