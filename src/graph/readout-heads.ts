/**
 * `addReadoutHeads`: a copy of a model with fitted linear detectors ("readout heads") appended as
 * standard operators, reading one layer:
 *
 *   layer [N, C, …] → GlobalAveragePool → Flatten          (a vector layer [N, C] is used as it is)
 *     → Sub(mean) → Div(scale)                             (the fitting set's standardisation)
 *     → Gemm(W_k, b_k) per category → HEAD_k [N, 1]        (one graph output per category)
 *     → Concat(axis 1) → HEADS [N, K]                      (the readout a sidecar names)
 *
 * The original nodes, initializers and outputs are kept byte-identical; the new tensors get names no
 * existing tensor has. Spatial averaging in the graph is the same per-channel mean a snapshot records
 * for the layer (`readChannelMeans`), so heads fitted on recorded channel means score the same values.
 */
import { UsageError } from '../errors.js';
import type { LoadedModel } from './load-model.js';
import { encodeWithAdditions } from './append.js';
import { freshNames, makeValueInfo, type NodeProto, type TensorProto } from './onnx.js';

/** What `addReadoutHeads` appends. */
export interface ReadoutHeadsSpec {
  /** The tensor the heads read: [N, C] or [N, C, …] (averaged over the axes after C). */
  layer: string;
  /** Rank of the layer per stimulus (1: vector; 2 or more: pooled). */
  rank: number;
  /** Standardisation: per-channel mean and scale (length C). */
  mean: Float64Array;
  scale: Float64Array;
  /** One head per category: weights over the standardised channels (length C) and an intercept. */
  heads: ReadonlyArray<{ category: string; weights: Float64Array; intercept: number }>;
  /** Name of the combined output [N, K] (default `readout_heads`; made unique). */
  output?: string;
}

/** The model bytes and the names chosen for the outputs. */
export interface ReadoutHeadsModel {
  bytes: Uint8Array;
  /** The combined output [N, K]. */
  output: string;
  /** One output [N, 1] per head, in order. */
  headOutputs: string[];
}

/** A tensor name made of the category: letters, digits, `_`, `-`, `.` kept, anything else `_`. */
function safe(text: string): string {
  return text.replace(/[^A-Za-z0-9_.-]/g, '_');
}

function floats(name: string, dims: number[], values: ArrayLike<number>): TensorProto {
  const data = Float32Array.from(values as ArrayLike<number>);
  return { name, dims, dataType: 1, rawData: new Uint8Array(data.buffer, data.byteOffset, data.byteLength) };
}

/**
 * Returns ONNX bytes of `model` with the heads appended (see the file comment).
 * @throws UsageError when the layer is not a tensor of the model, the opset is below 7 (no broadcasting
 *   Sub/Div), the sizes disagree, there are no heads, or a weight is not finite.
 */
export function addReadoutHeads(model: LoadedModel, spec: ReadoutHeadsSpec): ReadoutHeadsModel {
  const graph = model.proto.graph!;
  const C = spec.mean.length;
  if (model.opset < 7) throw new UsageError('E_HEADS', `${model.fileName} uses opset ${model.opset}; readout heads need opset 7 or later (broadcasting Sub/Div)`, { hint: 'export the model with a newer opset (torch.onnx.export(..., opset_version=17))' });
  if (spec.heads.length === 0) throw new UsageError('E_HEADS', 'no readout head to add');
  if (spec.scale.length !== C || spec.heads.some((h) => h.weights.length !== C)) throw new UsageError('E_HEADS', `readout heads on "${spec.layer}": ${C} means, ${spec.scale.length} scales, weights of ${spec.heads.map((h) => h.weights.length).join('/')} channels`);
  for (const h of spec.heads) {
    if (!Number.isFinite(h.intercept) || h.weights.some((w) => !Number.isFinite(w))) throw new UsageError('E_HEADS', `the head of "${h.category}" has a non-finite weight`);
  }
  const namer = freshNames(graph);
  if (!namer.has(spec.layer)) throw new UsageError('E_HEADS', `"${spec.layer}" is not a tensor of ${model.fileName}`);
  const fresh = namer.fresh;
  const nodes: NodeProto[] = [];
  const initializers: TensorProto[] = [];
  let features = spec.layer;
  if (spec.rank >= 2) {
    const pooled = fresh(`${spec.layer}/heads_pooled`);
    nodes.push({ name: fresh('heads_pool'), opType: 'GlobalAveragePool', input: [spec.layer], output: [pooled] });
    features = fresh(`${spec.layer}/heads_features`);
    nodes.push({ name: fresh('heads_flatten'), opType: 'Flatten', input: [pooled], output: [features], attribute: [{ name: 'axis', type: 2, i: 1 }] });
  }
  const meanName = fresh('heads_mean');
  const scaleName = fresh('heads_scale');
  initializers.push(floats(meanName, [C], spec.mean), floats(scaleName, [C], spec.scale));
  const centred = fresh('heads_centred');
  const standardised = fresh('heads_standardised');
  nodes.push({ name: fresh('heads_sub'), opType: 'Sub', input: [features, meanName], output: [centred] });
  nodes.push({ name: fresh('heads_div'), opType: 'Div', input: [centred, scaleName], output: [standardised] });
  const headOutputs: string[] = [];
  for (const head of spec.heads) {
    const w = fresh(`head_${safe(head.category)}_weight`);
    const b = fresh(`head_${safe(head.category)}_bias`);
    initializers.push(floats(w, [C, 1], head.weights), floats(b, [1], [head.intercept]));
    const out = fresh(`head_${safe(head.category)}`);
    nodes.push({ name: fresh(`gemm_${safe(head.category)}`), opType: 'Gemm', input: [standardised, w, b], output: [out] });
    headOutputs.push(out);
  }
  const output = fresh(spec.output ?? 'readout_heads');
  nodes.push({ name: fresh('heads_concat'), opType: 'Concat', input: headOutputs, output: [output], attribute: [{ name: 'axis', type: 2, i: 1 }] });

  const bytes = encodeWithAdditions(model, { node: nodes, initializer: initializers, output: [makeValueInfo(output, 1), ...headOutputs.map((h) => makeValueInfo(h, 1))] });
  return { bytes, output, headOutputs };
}
