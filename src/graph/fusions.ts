/**
 * Which recorded tensors cost the runtime an operator fusion. The CPU runtime fuses chains such as
 * Conv→Relu (and, in its blocked layout, Conv→Add→Relu) into one kernel whose intermediate results
 * never exist in memory. Exposing such an intermediate tensor as a graph output forbids the fusion:
 * the runtime must then write it out and run the chain as separate kernels. A tensor is fused away when
 * it is produced in the model but no longer appears in the graph the runtime builds from the unexposed
 * model (session/optimized-model.ts).
 */
import { optimizedModel } from '../session/optimized-model.js';
import type { LoadedModel } from './load-model.js';
import { decodeModel, encodeModel } from './onnx.js';

/**
 * The tensors of `names` that the runtime fuses away in `model` as it is (so that recording them costs
 * a fusion), in the order given.
 */
export async function tensorsFusedAway(model: LoadedModel, names: readonly string[]): Promise<string[]> {
  const optimized = decodeModel(await optimizedModel(encodeModel(model.proto), model.fileName));
  const kept = new Set<string>();
  for (const node of optimized.graph?.node ?? []) for (const out of node.output ?? []) kept.add(out);
  for (const out of optimized.graph?.output ?? []) kept.add(out.name ?? '');
  return names.filter((name) => !kept.has(name));
}
