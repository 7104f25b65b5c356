/**
 * `withCategoryScores`: a copy of a model (in memory) whose extra output holds the readout map's
 * category scores, so the replay machinery — finite differences and the reverse-mode gradient graph
 * alike — treats the mapped categories as an ordinary readout:
 *
 *   READOUT [N, U] → Gather(axis 1, units of g) → ReduceLogSumExp(axis 1, keepdims) → [N, 1]   per g
 *     → Concat(axis 1) → `category_scores` [N, G]
 *
 * A one-unit category is its Gather alone (LSE of one value is the value). The gradient of a category
 * score is Σ_{u∈g} softmax_g(y)_u · ∂y_u/∂x (the ReduceLogSumExp rule in gradient/rules-pool.ts); the
 * scores equal `groupScores` (src/stats/log-sum-exp.ts) up to float32 rounding. The copy keeps the
 * original's path and SHA-256 (snapshots of the original pair with it) and is never written to disk.
 */
import { UsageError } from '../errors.js';
import type { LoadedModel } from './load-model.js';
import { freshNames, makeValueInfo, onnx, type NodeProto, type TensorProto } from './onnx.js';

/** The model with the score output, and that output's name. */
export interface CategoryScoresModel {
  model: LoadedModel;
  /** Name of the [N, G] output. */
  output: string;
}

/**
 * Appends the category scores of `groups` (unit indices of `readout`, see the file comment).
 * @param model the loaded model (left unchanged).
 * @param readout the readout tensor, [N, U].
 * @param groups unit indices per category (each non-empty).
 * @returns the copy and its score output.
 * @throws UsageError when the readout is not a tensor of the model, a group is empty, or the opset is
 *   below 11 (ReduceLogSumExp with negative-free axes and Gather/Concat forms used here need 11).
 */
export function withCategoryScores(model: LoadedModel, readout: string, groups: ReadonlyArray<readonly number[]>): CategoryScoresModel {
  const graph = model.proto.graph!;
  if (model.opset < 11) throw new UsageError('E_READOUT_MAP', `${model.fileName} uses opset ${model.opset}; a readout map needs opset 11 or later`, { hint: 'export the model with a newer opset (torch.onnx.export(..., opset_version=17))' });
  const namer = freshNames(graph);
  if (!namer.has(readout)) throw new UsageError('E_READOUT_MAP', `"${readout}" is not a tensor of ${model.fileName}`);
  const fresh = namer.fresh;
  const nodes: NodeProto[] = [];
  const initializers: TensorProto[] = [];
  const parts: string[] = [];
  groups.forEach((units, g) => {
    if (units.length === 0) throw new UsageError('E_READOUT_MAP', `category ${g} of the readout map has no units`);
    const indices = fresh(`category_scores/units_${g}`);
    initializers.push(onnx.TensorProto.create({ name: indices, dataType: 7, dims: [units.length], int64Data: [...units] }));
    const picked = fresh(`category_scores/picked_${g}`);
    nodes.push({ name: fresh(`category_scores/gather_${g}`), opType: 'Gather', input: [readout, indices], output: [picked], attribute: [{ name: 'axis', type: 2, i: 1 }] });
    if (units.length === 1) {
      parts.push(picked);
      return;
    }
    const score = fresh(`category_scores/score_${g}`);
    const axes = model.opset >= 18 ? fresh(`category_scores/axes_${g}`) : null;
    if (axes) initializers.push(onnx.TensorProto.create({ name: axes, dataType: 7, dims: [1], int64Data: [1] }));
    nodes.push({
      name: fresh(`category_scores/lse_${g}`),
      opType: 'ReduceLogSumExp',
      input: axes ? [picked, axes] : [picked],
      output: [score],
      attribute: [{ name: 'keepdims', type: 2, i: 1 }, ...(axes ? [] : [{ name: 'axes', type: 7, ints: [1] }])],
    });
    parts.push(score);
  });
  const output = fresh('category_scores');
  nodes.push({ name: fresh('category_scores/concat'), opType: 'Concat', input: parts, output: [output], attribute: [{ name: 'axis', type: 2, i: 1 }] });
  const proto = onnx.ModelProto.create({
    ...model.proto,
    graph: onnx.GraphProto.create({
      ...graph,
      node: [...(graph.node ?? []), ...nodes],
      initializer: [...(graph.initializer ?? []), ...initializers],
      output: [...(graph.output ?? []), makeValueInfo(output, 1)],
    }),
  });
  return { model: { ...model, proto, outputs: [...model.outputs, output] }, output };
}
