/**
 * Which recordable tensors `--layers default` records.
 *
 * Maps and vectors (CNNs, classifier heads): activation functions, pooling, linear readouts (Gemm, and a
 * MatMul unless a bias Add follows it — then the Add, the layer's real output), merges of two or more
 * activation paths (residual Add, Concat, gating Mul), and the declared outputs.
 *
 * Token tensors (transformer blocks) get three per block, nothing else:
 * - the residual stream after the block: a residual Add none of whose operands comes from a multi-head
 *   attention (so the Add after the MLP, not the one after attention);
 * - the attention output: the operand of a residual Add that comes from a multi-head attention, after
 *   its output projection and bias (src/graph/infer-layout.ts finds the heads);
 * - the MLP activation: an activation operator (Relu, Gelu, …), a GELU written out as
 *   x·½·(1 + erf(x/√2)) or with tanh (opsets before 20) — the last Mul of that chain, x·Φ(x), never
 *   its parts (the product x·(1 + erf) is 2·GELU) — or a SiLU written out as x·σ(x) (the Mul, not σ).
 * Attention internals (heads layouts) are never default. Declared outputs always are.
 */
import { ACTIVATION_OPS, LINEAR_OPS, MERGE_OPS, POOLING_OPS } from './select.js';
import type { TensorLayout } from './layout.js';
import type { GraphStructure } from './structure.js';

/** A recordable tensor as the default rule sees it. */
export interface DefaultCandidate {
  name: string;
  op: string;
  shape: readonly number[];
  layout: TensorLayout;
}

/** What the rule needs besides the candidates. */
export interface DefaultContext {
  /** Tensors that depend on the data input. */
  dependent: ReadonlySet<string>;
  /** Whether a tensor (a node output or the data input) has the batch on its first axis. */
  batched: (name: string) => boolean;
  /** Declared graph outputs. */
  outputs: ReadonlySet<string>;
}

/** The names of the tensors the default selector records. */
export function defaultTensors(structure: GraphStructure, candidates: readonly DefaultCandidate[], context: DefaultContext): Set<string> {
  const byName = new Map(candidates.map((c) => [c.name, c]));
  const gelu = writtenOutActivations(structure, context.dependent);
  const chosen = new Set<string>();
  const attentionOutputs = new Set<string>();
  const blockOutputs = new Set<string>();
  for (const node of structure.nodes) {
    const y = node.outputs[0];
    const info = y ? byName.get(y) : undefined;
    if (!info || info.layout.kind !== 'tokens' || (node.opType !== 'Add' && node.opType !== 'Sum')) continue;
    const operands = node.inputs.filter((i) => i && context.dependent.has(i) && context.batched(i));
    if (operands.length < 2) continue;
    const fromAttention = operands.filter((i) => byName.get(i)?.layout.heads !== undefined);
    for (const o of fromAttention) attentionOutputs.add(o);
    if (fromAttention.length === 0) blockOutputs.add(y!);
  }
  const biasAdded = new Set<string>();
  for (const node of structure.nodes) {
    if (node.opType !== 'MatMul') continue;
    const consumers = structure.consumers.get(node.outputs[0] ?? '') ?? [];
    const next = consumers.length === 1 ? structure.nodes[consumers[0]!]! : null;
    if (next && next.opType === 'Add' && next.inputs.filter((i) => i && context.dependent.has(i)).length === 1) biasAdded.add(next.outputs[0]!);
  }
  for (const c of candidates) {
    const node = structure.nodes[structure.producer.get(c.name)!]!;
    let isDefault: boolean;
    if (context.outputs.has(c.name)) isDefault = true;
    else if (gelu.inner.has(c.name)) isDefault = false;
    else if (gelu.outputs.has(c.name)) isDefault = true;
    else if (c.layout.kind === 'heads') isDefault = false;
    else if (c.layout.kind === 'tokens') isDefault = blockOutputs.has(c.name) || attentionOutputs.has(c.name) || (ACTIVATION_OPS.has(c.op) && c.op !== 'Softmax' && c.op !== 'LogSoftmax');
    else {
      const batchedInputs = node.inputs.filter((i) => i && context.dependent.has(i) && context.batched(i));
      const isMerge = MERGE_OPS.has(c.op) && batchedInputs.length >= 2;
      const isLinear = c.op === 'MatMul' ? !isBiasFollowed(structure, c.name, biasAdded) : LINEAR_OPS.has(c.op) || biasAdded.has(c.name);
      isDefault = ACTIVATION_OPS.has(c.op) || POOLING_OPS.has(c.op) || isLinear || isMerge;
    }
    if (isDefault) chosen.add(c.name);
  }
  return chosen;
}

function isBiasFollowed(structure: GraphStructure, name: string, biasAdded: ReadonlySet<string>): boolean {
  const consumers = structure.consumers.get(name) ?? [];
  return consumers.length === 1 && biasAdded.has(structure.nodes[consumers[0]!]!.outputs[0] ?? '');
}

/**
 * Activations written out with standard operators. GELU: Erf (or Tanh) → Add of a constant → a chain of
 * at most two Muls, one of them by an activation (x or ½x), the others by constants. SiLU: Sigmoid(x) →
 * Mul by x. `outputs`: the last Mul of each chain (x·Φ(x), x·σ(x)); `inner`: every tensor between x and
 * it (the scaled input, Erf/Tanh/Sigmoid and its argument, 1 + erf, the partial products).
 */
export function writtenOutActivations(structure: GraphStructure, dependent: ReadonlySet<string>): { outputs: Set<string>; inner: Set<string> } {
  const outputs = new Set<string>();
  const inner = new Set<string>();
  const single = (tensor: string) => {
    const list = structure.consumers.get(tensor) ?? [];
    return list.length === 1 ? structure.nodes[list[0]!]! : null;
  };
  for (const node of structure.nodes) {
    if (node.opType === 'Sigmoid') {
      const mul = single(node.outputs[0]!);
      if (mul && mul.opType === 'Mul' && mul.inputs.includes(node.inputs[0]!)) {
        outputs.add(mul.outputs[0]!);
        inner.add(node.outputs[0]!);
      }
      continue;
    }
    if (node.opType !== 'Erf' && node.opType !== 'Tanh') continue;
    const add = single(node.outputs[0]!);
    if (!add || add.opType !== 'Add' || add.inputs.filter((i) => dependent.has(i)).length !== 1) continue;
    const chain: string[] = [node.outputs[0]!, add.outputs[0]!];
    let t = add.outputs[0]!;
    let data: string | null = null;
    for (let muls = 0; muls < 2; muls++) {
      const mul = single(t);
      if (!mul || mul.opType !== 'Mul') break;
      const other = mul.inputs[0] === t ? mul.inputs[1] : mul.inputs[0];
      if (other && dependent.has(other)) {
        if (data !== null) break;
        data = other;
      }
      t = mul.outputs[0]!;
      chain.push(t);
    }
    if (data === null) continue;
    // the input x: the activation multiplied in, or its source when that is ½·x
    const xNode = structure.producer.get(data) !== undefined ? structure.nodes[structure.producer.get(data)!]! : null;
    const x = xNode && xNode.opType === 'Mul' && xNode.inputs.filter((i) => dependent.has(i)).length === 1 ? xNode.inputs.find((i) => dependent.has(i))! : data;
    if (x !== data) chain.push(data);
    const final = chain.pop()!;
    outputs.add(final);
    for (const tensor of chain) inner.add(tensor);
    // the argument of Erf/Tanh, back to x (x/√2, or the tanh polynomial)
    const stack = node.inputs.filter((i) => dependent.has(i));
    for (let visited = 0; stack.length > 0 && visited < 16; visited++) {
      const tensor = stack.pop()!;
      if (tensor === x || inner.has(tensor)) continue;
      inner.add(tensor);
      const p = structure.producer.get(tensor);
      if (p !== undefined) stack.push(...structure.nodes[p]!.inputs.filter((i) => dependent.has(i)));
    }
  }
  return { outputs, inner };
}
