import type { LoadedModel } from './load-model.js';
import { makeValueInfo, type NodeProto } from './onnx.js';
import type { GraphStructure } from './structure.js';

/** The part of a network downstream of one or more sites, as a model of its own. */
export interface TailGraph {
  /** The tail as a model: its inputs are the boundary tensors, its outputs the requested tensors it computes. */
  model: LoadedModel;
  /** Tensors the tail reads that are computed upstream (the sites included): they must be fed. */
  boundary: string[];
  /** Tensors computed by the tail (every descendant of the sites). */
  computed: Set<string>;
}

/**
 * Extracts the subgraph of nodes that depend on any of `sites`. Everything else of the network is
 * upstream or on a parallel path and keeps its baseline values. `batchShapes` gives the per-stimulus
 * shape of each boundary tensor (from the probe), used to declare the tail's inputs.
 * Tensors in `recompute` (upstream of the sites, e.g. not recorded in a baseline) have their producing
 * nodes added to the tail, so that their inputs are fed instead of them.
 * Returns null when nothing depends on the sites (e.g. a site that is only a graph output).
 */
export function extractTail(model: LoadedModel, structure: GraphStructure, sites: readonly string[], outputs: readonly string[], recompute: ReadonlySet<string> = new Set()): TailGraph | null {
  const { inTail, computed } = downstreamOf(structure, sites);
  // Upstream tensors the caller cannot feed are recomputed inside the tail from their own inputs
  // (they are not affected by the modulation, so this reproduces their baseline values).
  const helpers = new Set<string>();
  for (const tensor of recompute) {
    const p = structure.producer.get(tensor);
    if (p === undefined || inTail[p]) continue;
    inTail[p] = 1;
    for (const out of structure.nodes[p]!.outputs) helpers.add(out);
  }
  // Static tensors (initializers, and outputs of nodes fed only by static tensors, e.g. Constant) are
  // computed inside the tail wherever tail nodes read them, instead of being fed.
  const { isStatic, staticTensors } = staticPart(structure);
  const needStatic = (tensor: string): void => {
    const p = structure.producer.get(tensor);
    if (p === undefined || !isStatic[p] || inTail[p]) return;
    inTail[p] = 1;
    for (const input of structure.nodes[p]!.inputs) if (input) needStatic(input);
  };
  structure.nodes.forEach((node, i) => {
    if (inTail[i]) for (const input of node.inputs) if (input) needStatic(input);
  });
  for (const tensor of staticTensors) if (!structure.initializers.has(tensor)) computed.add(tensor);
  // A site computed by the tail (downstream of another site) stays computed; the others are fed.
  const boundary: string[] = [];
  const boundarySet = new Set<string>();
  const protoNodes = model.proto.graph?.node ?? [];
  const byOutput = new Map<string, NodeProto>();
  for (const node of protoNodes) for (const out of node.output ?? []) if (out) byOutput.set(out, node);
  const tailNodes: NodeProto[] = [];
  structure.nodes.forEach((node, i) => {
    if (!inTail[i]) return;
    const proto = byOutput.get(node.outputs[0]!);
    if (proto) tailNodes.push(proto);
    for (const input of node.inputs) {
      if (!input || computed.has(input) || helpers.has(input) || structure.initializers.has(input) || boundarySet.has(input)) continue;
      boundarySet.add(input);
      boundary.push(input);
    }
  });
  for (const site of sites) {
    if (!computed.has(site) && !helpers.has(site) && !boundarySet.has(site)) {
      boundarySet.add(site);
      boundary.push(site);
    }
  }
  if (tailNodes.length === 0) return null;
  const used = new Set(tailNodes.flatMap((n) => n.input ?? []));
  const graph = model.proto.graph!;
  const tailOutputs = [...new Set([...outputs.filter((o) => computed.has(o)), ...sites.filter((s) => !computed.has(s))])];
  const newGraph = Object.assign(Object.create(Object.getPrototypeOf(graph)), graph, {
    node: tailNodes,
    initializer: (graph.initializer ?? []).filter((t) => used.has(t.name ?? '')),
    input: boundary.map((name) => makeValueInfo(name, 1)),
    output: tailOutputs.map((name) => makeValueInfo(name)),
    valueInfo: [],
  });
  const proto = Object.assign(Object.create(Object.getPrototypeOf(model.proto)), model.proto, { graph: newGraph });
  return { model: { ...model, proto, outputs: tailOutputs }, boundary, computed };
}

/** Nodes that depend on any of `sites` (flags in topological order) and the tensors they compute. */
function downstreamOf(structure: GraphStructure, sites: readonly string[]): { inTail: Uint8Array; computed: Set<string> } {
  const inTail = new Uint8Array(structure.nodes.length);
  const computed = new Set<string>();
  const queue = [...sites];
  while (queue.length > 0) {
    const tensor = queue.pop()!;
    for (const consumer of structure.consumers.get(tensor) ?? []) {
      if (inTail[consumer]) continue;
      inTail[consumer] = 1;
      for (const out of structure.nodes[consumer]!.outputs) {
        computed.add(out);
        queue.push(out);
      }
    }
  }
  return { inTail, computed };
}

/** Nodes fed only by initializers or by other such nodes (e.g. Constant), and every tensor that is static so. */
function staticPart(structure: GraphStructure): { isStatic: Uint8Array; staticTensors: Set<string> } {
  const isStatic = new Uint8Array(structure.nodes.length);
  const staticTensors = new Set(structure.initializers);
  structure.nodes.forEach((node, i) => {
    if (node.inputs.every((input) => !input || staticTensors.has(input))) {
      isStatic[i] = 1;
      for (const out of node.outputs) staticTensors.add(out);
    }
  });
  return { isStatic, staticTensors };
}

/** Where the tail of some sites can be fed from: the upstream tensors it must recompute, or the one it cannot reach. */
export type UpstreamCut = { recompute: Set<string> } | { missing: string };

/**
 * Finds the cut between the network input and `sites` that lies closest to the sites among tensors
 * `canFeed` accepts (e.g. those a baseline recorded at full float32 resolution). Walking upstream from
 * every tensor the downstream part reads (the sites included, unless one is computed downstream of
 * another), a tensor that can be fed ends the walk; one that cannot is recomputed from its producer's
 * inputs, which are walked in turn. Static tensors (weights, constants) are never fed. The recompute
 * set is what `extractTail` takes, so that the tail computes the sites themselves from the cut.
 * @returns the tensors to recompute (empty when everything read is fed), or `missing`: the first tensor
 *   reached that cannot be fed and has no producer (the network input: no such cut exists).
 */
export function upstreamCut(structure: GraphStructure, sites: readonly string[], canFeed: (tensor: string) => boolean): UpstreamCut {
  const { inTail, computed } = downstreamOf(structure, sites);
  const { staticTensors } = staticPart(structure);
  const recompute = new Set<string>();
  const seen = new Set<string>();
  const queue: string[] = [];
  const need = (tensor: string): void => {
    if (!tensor || seen.has(tensor) || computed.has(tensor) || staticTensors.has(tensor)) return;
    seen.add(tensor);
    queue.push(tensor);
  };
  structure.nodes.forEach((node, i) => {
    if (inTail[i]) for (const input of node.inputs) need(input);
  });
  for (const site of sites) need(site);
  // breadth first, so that `missing` names a tensor on a shortest unfed path
  for (let head = 0; head < queue.length; head++) {
    const tensor = queue[head]!;
    if (canFeed(tensor)) continue;
    const p = structure.producer.get(tensor);
    if (p === undefined) return { missing: tensor };
    recompute.add(tensor);
    for (const input of structure.nodes[p]!.inputs) need(input);
  }
  return { recompute };
}
