import { copyFileSync } from 'node:fs';
import { join } from 'node:path';
import type { LoadedModel } from '../../src/graph/load-model.js';
import { createRandom } from '../../src/random.js';
import { createNetworkSession, type RuntimeModel } from '../../src/session/network-session.js';
import { tempFolder } from './onnx-builder.js';

/** The committed residual reference network (3×64×64 input). */
export const RESIDUAL = new URL('../reference/fixtures/residual.onnx', import.meta.url).pathname;

/** A copy of the residual fixture in a folder of its own (for tests that change, link or move it). */
export function residualCopy(): string {
  const path = join(tempFolder(), 'residual.onnx');
  copyFileSync(RESIDUAL, path);
  return path;
}

/** Names of the outputs of the first `count` nodes of `model`. */
export function firstTensors(model: LoadedModel, count: number): string[] {
  return (model.proto.graph!.node ?? []).slice(0, count).flatMap((n) => n.output ?? []);
}

/** The bytes of `fetch` for one fixed random batch (seed `seed`) of two 3×64×64 inputs of the residual network. */
export async function residualOutputs(model: Uint8Array | RuntimeModel, input: string, fetch: string[], seed = 7): Promise<Record<string, Buffer>> {
  const rng = createRandom(seed);
  const data = new Float32Array(2 * 3 * 64 * 64).map(() => rng.normal());
  const session = await createNetworkSession(model, { threads: 1 });
  try {
    const out = await session.run({ [input]: { data, dims: [2, 3, 64, 64] } }, fetch);
    return Object.fromEntries(fetch.map((name) => [name, Buffer.from(out[name]!.data.buffer, out[name]!.data.byteOffset, out[name]!.data.byteLength)]));
  } finally {
    await session.close();
  }
}
