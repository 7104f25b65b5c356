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
import { analyseGraph } from './structure.js';

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

/** Activations the CPU runtime fuses into the convolution before them (its Conv activation fusion). */
const FUSED_ACTIVATIONS: ReadonlySet<string> = new Set(['Relu', 'Clip', 'LeakyRelu', 'Sigmoid', 'Tanh', 'HardSigmoid']);

/**
 * The tensors of `names` that are, from the graph alone, a convolution's output read only by an
 * activation the runtime fuses into it (Conv→Relu, Conv→Clip, …) or only by an Add whose sum goes on
 * into such an activation, or that sum itself (a residual block's Conv→Add→Relu, fused in the
 * runtime's blocked layout).
 * Recording one of them keeps the runtime from fusing there. Cheap (no session); `tensorsFusedAway`
 * asks the runtime itself.
 */
export function fusionBreaks(model: LoadedModel, names: readonly string[]): string[] {
  const g = analyseGraph(model);
  const only = (tensor: string): string | null => {
    const readers = g.consumers.get(tensor) ?? [];
    return readers.length === 1 && !g.outputs.includes(tensor) ? g.nodes[readers[0]!]!.opType : null;
  };
  const readerOutput = (tensor: string): string => g.nodes[(g.consumers.get(tensor) ?? [])[0]!]!.outputs[0]!;
  const fromConvOnly = (tensor: string): boolean => {
    const producer = g.producer.get(tensor);
    return producer !== undefined && g.nodes[producer]!.opType === 'Conv' && only(tensor) === 'Add';
  };
  return names.filter((name) => {
    const producer = g.producer.get(name);
    if (producer === undefined) return false;
    const node = g.nodes[producer]!;
    const next = only(name);
    if (node.opType === 'Conv') {
      if (next !== null && FUSED_ACTIVATIONS.has(next)) return true;
      return next === 'Add' && FUSED_ACTIVATIONS.has(only(readerOutput(name)) ?? '');
    }
    // a residual sum: one addend straight from a convolution, the sum read only by a fused activation
    return node.opType === 'Add' && next !== null && FUSED_ACTIVATIONS.has(next) && node.inputs.some(fromConvOnly);
  });
}

/**
 * A one-line notice naming the recorded tensors that cost the runtime a fusion (`fusionBreaks`), or
 * null when there are none.
 */
export function fusionNotice(model: LoadedModel, names: readonly string[]): string | null {
  const breaks = fusionBreaks(model, names);
  if (breaks.length === 0) return null;
  const shown = breaks.slice(0, 3).join(', ');
  const more = breaks.length > 3 ? ` and ${breaks.length - 3} more` : '';
  return `${breaks.length} of the ${names.length} recorded tensors are results the runtime would otherwise fuse into the activation after them (${shown}${more}: a convolution's output or a residual sum before its Relu); recording them costs those fusions (slower inference) — record the activations alone (e.g. --layers op:Relu) where these are not needed`;
}
