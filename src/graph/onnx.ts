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

/**
 * Decodes ONNX bytes; throws whatever protobufjs throws (callers wrap it with the file name). Where the
 * bytes hold the `graph` field more than once (as graph/append.ts writes them), the occurrences are
 * merged as the Protocol Buffers rules say and the runtime does (protobuf.dev, "Encoding", Last One
 * Wins: repeated fields concatenated, a singular field set later replaces an earlier one); protobufjs
 * by itself keeps only the last occurrence.
 */
export function decodeModel(bytes: Uint8Array): ModelProto {
  const model = onnx.ModelProto.decode(bytes);
  const ranges = graphFieldRanges(bytes);
  if (ranges && ranges.length > 1) model.graph = mergeGraphs(ranges.map(([start, end]) => onnx.GraphProto.decode(bytes.subarray(start, end))));
  return model;
}

/** ModelProto's field number of `graph` (onnx.proto). */
export const MODEL_GRAPH_FIELD = 7;

/**
 * Byte ranges of the payloads of every top-level `graph` field in `bytes`, in order; null where the scan
 * meets something malformed (a length past the end, an unknown wire type, unbalanced groups: the plain
 * decode then decides).
 */
function graphFieldRanges(bytes: Uint8Array): Array<[number, number]> | null {
  const ranges: Array<[number, number]> = [];
  let at = 0;
  const varint = (): number => {
    let value = 0;
    let scale = 1;
    for (;;) {
      if (at >= bytes.length) return -1;
      const byte = bytes[at++]!;
      value += (byte & 0x7f) * scale;
      if (byte < 0x80) return value;
      scale *= 128;
      if (scale > 2 ** 63) return -1;
    }
  };
  // fields inside (deprecated) groups are not the model's own: only depth 0 counts
  let depth = 0;
  while (at < bytes.length) {
    const tag = varint();
    if (tag < 0) return null;
    const wire = tag % 8;
    if (wire === 0) {
      if (varint() < 0) return null;
    } else if (wire === 1) {
      at += 8;
    } else if (wire === 5) {
      at += 4;
    } else if (wire === 2) {
      const length = varint();
      if (length < 0 || at + length > bytes.length) return null;
      if (depth === 0 && Math.floor(tag / 8) === MODEL_GRAPH_FIELD) ranges.push([at, at + length]);
      at += length;
    } else if (wire === 3) {
      depth += 1;
    } else if (wire === 4) {
      if (depth === 0) return null;
      depth -= 1;
    } else {
      return null;
    }
  }
  return at === bytes.length && depth === 0 ? ranges : null;
}

/**
 * The graphs in order as one: repeated fields concatenated, name and doc string from the last graph
 * that sets them. Linear in the total size, however many occurrences a file holds.
 */
function mergeGraphs(graphs: readonly onnxProto.onnx.GraphProto[]): onnxProto.onnx.GraphProto {
  const merged = onnx.GraphProto.create({ node: [], initializer: [], sparseInitializer: [], input: [], output: [], valueInfo: [], quantizationAnnotation: [] });
  const repeated = ['node', 'initializer', 'sparseInitializer', 'input', 'output', 'valueInfo', 'quantizationAnnotation'] as const;
  for (const graph of graphs) {
    for (const key of repeated) {
      const into = merged[key] as unknown[];
      for (const item of graph[key] as unknown[]) into.push(item);
    }
    for (const key of ['name', 'docString'] as const) if (Object.hasOwn(graph, key)) merged[key] = graph[key];
  }
  return merged;
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
