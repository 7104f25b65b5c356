/**
 * The one place that knows the protobuf classes of ONNX (from `onnx-proto`). Everything else in
 * src/graph/ works on the decoded `ModelProto` through the helpers here.
 */
import onnxProto from 'onnx-proto';

export const onnx = onnxProto.onnx;
export type ModelProto = onnxProto.onnx.ModelProto;
export type GraphProto = onnxProto.onnx.IGraphProto;
export type NodeProto = onnxProto.onnx.INodeProto;
export type TensorProto = onnxProto.onnx.ITensorProto;
export type ValueInfoProto = onnxProto.onnx.IValueInfoProto;
export type AttributeProto = onnxProto.onnx.IAttributeProto;

/** ONNX TensorProto.DataType codes Sonde handles, and their names (from onnx.proto3). */
export const ONNX_DTYPE_NAMES: Readonly<Record<number, string>> = {
  1: 'float32', 2: 'uint8', 3: 'int8', 4: 'uint16', 5: 'int16', 6: 'int32', 7: 'int64', 8: 'string',
  9: 'bool', 10: 'float16', 11: 'float64', 12: 'uint32', 13: 'uint64', 16: 'bfloat16',
};

/** Converts a protobuf int64 field (number or Long) to a JS number. */
export function toNumber(value: number | { toNumber(): number } | null | undefined): number {
  if (value === null || value === undefined) return 0;
  return typeof value === 'number' ? value : value.toNumber();
}

/** Decodes ONNX bytes; throws whatever protobufjs throws (callers wrap it with the file name). */
export function decodeModel(bytes: Uint8Array): ModelProto {
  return onnx.ModelProto.decode(bytes);
}

/** Encodes a (possibly modified) model back to bytes. */
export function encodeModel(model: ModelProto): Uint8Array {
  return onnx.ModelProto.encode(model).finish();
}

/** A graph output/input declaration for `name`, carrying the element type when known. */
export function makeValueInfo(name: string, elemType?: number, dims?: Array<number | string>): ValueInfoProto {
  const info: ValueInfoProto = { name };
  if (elemType !== undefined) {
    info.type = {
      tensorType: {
        elemType,
        ...(dims ? { shape: { dim: dims.map((d) => (typeof d === 'number' ? { dimValue: d } : { dimParam: d })) } } : {}),
      },
    };
  }
  return info;
}

/**
 * A name maker for nodes and tensors added to `graph`: returns `wanted`, or `wanted_2`, `wanted_3`, … when
 * a node, tensor, initializer or input of the graph (or an earlier call) already has that name.
 */
export function freshNames(graph: NonNullable<ModelProto['graph']>): { has(name: string): boolean; fresh(wanted: string): string } {
  const names = new Set<string>();
  for (const node of graph.node ?? []) {
    for (const t of [...(node.input ?? []), ...(node.output ?? [])]) names.add(t);
    if (node.name) names.add(node.name);
  }
  for (const t of graph.initializer ?? []) if (t.name) names.add(t.name);
  for (const t of graph.input ?? []) if (t.name) names.add(t.name);
  return {
    has: (name) => names.has(name),
    fresh(wanted) {
      let name = wanted;
      for (let i = 2; names.has(name); i++) name = `${wanted}_${i}`;
      names.add(name);
      return name;
    },
  };
}
