/**
 * Compute estimates from shapes: multiply-accumulate operations (MACs) of the Conv, Gemm and MatMul
 * nodes of a network, and the share of them downstream of a site. Other operators (activations,
 * pooling, additions) are left out: in convolutional networks they are a small fraction of the
 * arithmetic (common practice when quoting network cost in MACs/FLOPs).
 */
import type { ModelInspection } from '../record/inspect-model.js';
import { toNumber } from '../graph/onnx.js';

/** The result of `estimateMacs`. */
export interface MacEstimate {
  /** MACs per stimulus of the whole network (Conv, Gemm, MatMul). */
  total: number;
  /** Per node output tensor name: MACs per stimulus of the node producing it. */
  byOutput: Map<string, number>;
}

/**
 * MACs per stimulus of every Conv / Gemm / MatMul node, from the probed output shapes and the weight
 * shapes: Conv: output elements × (input channels / group) × kernel area; Gemm / MatMul: output
 * elements × the inner dimension (the first input's last axis, or the weight's when the input is not
 * a recorded tensor).
 * @param inspection an inspected model (`inspectModel`).
 * @returns the total and the per-node counts.
 * @throws never; nodes whose shapes are unknown count 0.
 */
export function estimateMacs(inspection: ModelInspection): MacEstimate {
  const shapes = new Map(inspection.layers.map((l) => [l.name, l.shape]));
  const weights = new Map<string, number[]>();
  for (const t of inspection.model.proto.graph?.initializer ?? []) weights.set(t.name ?? '', (t.dims ?? []).map((d) => toNumber(d)));
  const byOutput = new Map<string, number>();
  let total = 0;
  for (const node of inspection.structure.nodes) {
    const out = node.outputs[0];
    if (out === undefined) continue;
    const outShape = shapes.get(out);
    if (!outShape) continue;
    const outElements = outShape.reduce((a, b) => a * b, 1);
    let inner = 0;
    if (node.opType === 'Conv') {
      const w = weights.get(node.inputs[1] ?? '');
      if (w && w.length >= 3) inner = w.slice(1).reduce((a, b) => a * b, 1); // [M, C/group, kH, kW]
    } else if (node.opType === 'Gemm' || node.opType === 'MatMul') {
      const a = shapes.get(node.inputs[0] ?? '');
      const b = weights.get(node.inputs[1] ?? '');
      if (a && a.length > 0) inner = a[a.length - 1]!;
      else if (b && b.length === 2) inner = b[0]!;
    }
    if (inner > 0) {
      const macs = outElements * inner;
      byOutput.set(out, macs);
      total += macs;
    }
  }
  return { total, byOutput };
}

/**
 * The share of the network's MACs computed downstream of a site (by the nodes whose outputs are in
 * `computed`, e.g. `extractTail(...).computed`).
 * @param estimate from `estimateMacs`.
 * @param computed tensors the downstream part computes.
 * @returns a fraction in [0, 1]; NaN when the network has no counted MACs.
 * @throws never.
 */
export function downstreamShare(estimate: MacEstimate, computed: ReadonlySet<string>): number {
  if (estimate.total === 0) return Number.NaN;
  let downstream = 0;
  for (const [name, macs] of estimate.byOutput) if (computed.has(name)) downstream += macs;
  return downstream / estimate.total;
}
