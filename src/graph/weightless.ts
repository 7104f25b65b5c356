/**
 * A model without the values of its weights, for runs that need shapes only (the inspection's probe).
 * Every floating-point initializer of at least `minElements` elements becomes a ConstantOfShape node
 * that fills a tensor of its type and dims with zeros when the graph runs: the model's bytes shrink to
 * its structure, and a runtime session over it neither copies nor prepacks the weights. Shapes computed
 * by the graph do not depend on the values of float weights (integer tensors — shapes, indices, axes —
 * and small float tensors such as resize scales are kept as they are).
 */
import { toNumber, freshNames, type NodeProto, type ModelProto, type TensorProto } from './onnx.js';
import { tensorElementCount, type LoadedModel } from './load-model.js';

/** ONNX element types ConstantOfShape fills (opset 9 on): float32, float16, float64, with their byte sizes. */
const FILLABLE: ReadonlyMap<number, number> = new Map([
  [1, 4],
  [10, 2],
  [11, 8],
]);

/** ONNX AttributeProto.AttributeType TENSOR. */
const ATTRIBUTE_TENSOR = 4;
/** ONNX TensorProto.DataType INT64. */
const INT64 = 7;

/**
 * The model with its large float initializers replaced by zero-filled ConstantOfShape nodes (a copy:
 * `model` is not changed). Returns `model` itself when nothing qualifies or the opset predates
 * ConstantOfShape (9).
 */
export function weightlessModel(model: LoadedModel, minElements = 1024): LoadedModel {
  const graph = model.proto.graph!;
  if (model.opset < 9) return model;
  const names = freshNames(graph);
  const kept: TensorProto[] = [];
  const fills: NodeProto[] = [];
  const replaced = new Set<string>();
  for (const tensor of graph.initializer ?? []) {
    const bytes = FILLABLE.get(tensor.dataType ?? 0);
    if (bytes === undefined || !tensor.name || tensorElementCount(tensor) < minElements) {
      kept.push(tensor);
      continue;
    }
    const dims = (tensor.dims ?? []).map(toNumber);
    const shape = names.fresh(`${tensor.name}__shape`);
    kept.push({ name: shape, dataType: INT64, dims: [dims.length], int64Data: dims });
    fills.push({
      name: names.fresh(`${tensor.name}__zeros`),
      opType: 'ConstantOfShape',
      input: [shape],
      output: [tensor.name],
      attribute: [{ name: 'value', type: ATTRIBUTE_TENSOR, t: { dataType: tensor.dataType!, dims: [1], rawData: new Uint8Array(bytes) } }],
    });
    replaced.add(tensor.name);
  }
  if (fills.length === 0) return model;
  const proto = {
    ...model.proto,
    graph: {
      ...graph,
      initializer: kept,
      node: [...fills, ...(graph.node ?? [])],
      // models of IR version < 4 also list initializers as graph inputs: a node output must not be one
      input: (graph.input ?? []).filter((input) => !replaced.has(input.name ?? '')),
    },
  } as ModelProto;
  return { ...model, proto };
}
