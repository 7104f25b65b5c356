/**
 * Exposing tensors as float16 from inside the graph: for `record --dtype float16`, each recorded
 * tensor gets a standard ONNX `Cast` node (to = FLOAT16) whose output becomes the graph output, so the
 * runtime converts with its own vectorised kernel and hands over half the bytes; the float32 tensor
 * itself is no longer a graph output (the runtime may reuse its memory once the Cast has read it).
 * ONNX Cast from float to float16 rounds to nearest even and turns values beyond the float16 range into
 * ±Infinity (onnx Operators.md, Cast), the same as IEEE 754 binary16 conversion.
 */
import type { LoadedModel } from './load-model.js';
import { encodeModel, makeValueInfo, type NodeProto, type ValueInfoProto } from './onnx.js';

/** ONNX TensorProto.DataType of float16. */
const FLOAT16 = 10;

/** The graph output name that carries tensor `name` cast to float16. */
export function halfOutputName(name: string): string {
  return `${name}::float16`;
}

/**
 * Returns ONNX bytes of `model` with every tensor in `names` cast to float16 and exposed as
 * `halfOutputName(name)` (the model's own outputs stay as they are). Nodes and initializers of the
 * model are untouched, so weights stay byte-identical.
 * @throws RangeError when an output name is already taken in the graph.
 */
export function exposeTensorsAsFloat16(model: LoadedModel, names: readonly string[]): Uint8Array {
  const graph = model.proto.graph!;
  const originalNodes = graph.node ?? [];
  const originalOutputs = graph.output ?? [];
  const taken = new Set<string>();
  for (const node of originalNodes) for (const out of node.output ?? []) taken.add(out);
  for (const info of graph.input ?? []) taken.add(info.name ?? '');
  const casts: NodeProto[] = [];
  const outputs: ValueInfoProto[] = [];
  for (const name of new Set(names)) {
    const half = halfOutputName(name);
    if (taken.has(half)) throw new RangeError(`tensor "${half}" already exists in ${model.fileName}`);
    casts.push({ name: `sonde_float16/${name}`, opType: 'Cast', input: [name], output: [half], attribute: [{ name: 'to', type: 2, i: FLOAT16 }] });
    outputs.push(makeValueInfo(half, FLOAT16));
  }
  graph.node = [...originalNodes, ...casts];
  graph.output = [...originalOutputs, ...outputs];
  try {
    return encodeModel(model.proto);
  } finally {
    graph.node = originalNodes;
    graph.output = originalOutputs;
  }
}
