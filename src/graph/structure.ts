import type { LoadedModel } from './load-model.js';
import type { NodeProto } from './onnx.js';

/** One node of the main graph, with its position in topological order. */
export interface GraphNode {
  /** Position in topological order (0-based). */
  order: number;
  name: string;
  opType: string;
  inputs: string[];
  outputs: string[];
}

/** Producer/consumer tables of a model's main graph (subgraphs of If/Loop are opaque nodes). */
export interface GraphStructure {
  /** Nodes in a stable topological order (ties keep the file's order). */
  nodes: GraphNode[];
  /** Tensor name → index into `nodes` of the node producing it. */
  producer: Map<string, number>;
  /** Tensor name → indices into `nodes` of the nodes reading it. */
  consumers: Map<string, number[]>;
  /** Names of initializers (weights, constants stored in the graph). */
  initializers: Set<string>;
  /** Name of the data input. */
  inputName: string;
  /** Graph output names. */
  outputs: string[];
}

/**
 * Builds producer/consumer tables and a topological order (Kahn's algorithm, ready nodes taken in
 * file order, so an already sorted graph keeps its order).
 */
export function analyseGraph(model: LoadedModel): GraphStructure {
  const protoNodes: NodeProto[] = model.proto.graph?.node ?? [];
  const initializers = new Set((model.proto.graph?.initializer ?? []).map((t) => t.name ?? ''));
  const producerOf = new Map<string, number>();
  protoNodes.forEach((node, i) => {
    for (const out of node.output ?? []) if (out) producerOf.set(out, i);
  });
  const indegree = new Int32Array(protoNodes.length);
  const dependents: number[][] = protoNodes.map(() => []);
  protoNodes.forEach((node, i) => {
    const seen = new Set<number>();
    for (const name of node.input ?? []) {
      const p = name ? producerOf.get(name) : undefined;
      if (p !== undefined && !seen.has(p)) {
        seen.add(p);
        indegree[i]! += 1;
        dependents[p]!.push(i);
      }
    }
  });
  // Kahn's algorithm with a min-heap-free approach: graphs are usually sorted already, so scan in order.
  const order: number[] = [];
  const ready: number[] = [];
  for (let i = 0; i < protoNodes.length; i++) if (indegree[i] === 0) ready.push(i);
  ready.sort((a, b) => b - a); // pop smallest index first
  while (ready.length > 0) {
    const next = ready.pop()!;
    order.push(next);
    let added = false;
    for (const d of dependents[next]!) {
      indegree[d]! -= 1;
      if (indegree[d] === 0) {
        ready.push(d);
        added = true;
      }
    }
    if (added) ready.sort((a, b) => b - a);
  }
  const nodes: GraphNode[] = order.map((i, position) => {
    const node = protoNodes[i]!;
    return {
      order: position,
      name: node.name || `${node.opType}_${i}`,
      opType: node.opType ?? '',
      inputs: (node.input ?? []).slice(),
      outputs: (node.output ?? []).filter((o) => o.length > 0),
    };
  });
  const producer = new Map<string, number>();
  const consumers = new Map<string, number[]>();
  nodes.forEach((node, i) => {
    for (const out of node.outputs) producer.set(out, i);
    for (const name of node.inputs) {
      if (!name) continue;
      const list = consumers.get(name);
      if (list) {
        if (list[list.length - 1] !== i) list.push(i);
      } else consumers.set(name, [i]);
    }
  });
  return { nodes, producer, consumers, initializers, inputName: model.input.name, outputs: model.outputs };
}

/** Operators that apply learned weights: the unit of "weight layers" depth. */
export const WEIGHT_OPS: ReadonlySet<string> = new Set(['Conv', 'ConvTranspose', 'ConvInteger', 'QLinearConv', 'Gemm', 'MatMul', 'MatMulInteger', 'QLinearMatMul', 'Einsum']);

/**
 * Weight-layer depth of every tensor of the main graph: the largest number of weight layers (`WEIGHT_OPS`
 * nodes with at least one input that does not depend on the data input, i.e. a weight) on any path from
 * the data input to the tensor, the producing node included. The data input is 0; tensors computed from
 * weights only are 0 too. It depends on the graph alone, never on which tensors a snapshot recorded,
 * so "weight layers between a site and a layer" is the same whatever the selection; a MatMul of two
 * activations (attention scores) is not a weight layer. Used as the depth unit of survival and depth
 * profiles.
 * @returns tensor name → weight layers (nodes in topological order, so one pass).
 */
export function weightLayerDepths(structure: GraphStructure): Map<string, number> {
  const depth = new Map<string, number>([[structure.inputName, 0]]);
  const dependent = new Set<string>([structure.inputName]);
  for (const node of structure.nodes) {
    let deepest = -1;
    let hasWeight = false;
    for (const name of node.inputs) {
      if (!name) continue;
      if (dependent.has(name)) deepest = Math.max(deepest, depth.get(name) ?? 0);
      else hasWeight = true;
    }
    const fromData = deepest >= 0 && node.opType !== 'Constant';
    const value = fromData ? deepest + (WEIGHT_OPS.has(node.opType) && hasWeight ? 1 : 0) : 0;
    for (const out of node.outputs) {
      depth.set(out, value);
      if (fromData) dependent.add(out);
    }
  }
  return depth;
}
