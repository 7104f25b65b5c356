/**
 * Exposing tensors as float16 from inside the graph: for `record --dtype float16`, each recorded
 * tensor gets a standard ONNX `Cast` node (to = FLOAT16) whose output becomes the graph output, so the
 * runtime converts with its own vectorised kernel and hands over half the bytes; the float32 tensor
 * itself is no longer a graph output (the runtime may reuse its memory once the Cast has read it).
 * ONNX Cast from float to float16 rounds to nearest even and turns values beyond the float16 range into
 * ±Infinity (onnx Operators.md, Cast), the same as IEEE 754 binary16 conversion.
 */
import type { LoadedModel } from './load-model.js';
import type { LayoutGeometry } from './layout.js';
import { encodeWithAdditions, type AppendOptions, type GraphAdditions } from './append.js';
import { makeValueInfo, onnx, type NodeProto, type TensorProto, type ValueInfoProto } from './onnx.js';

/** ONNX TensorProto.DataType of float16, float32 and int64. */
const FLOAT16 = 10;
const FLOAT32 = 1;
const INT64 = 7;

/** The graph output name that carries tensor `name` cast to float16. */
export function halfOutputName(name: string): string {
  return `${name}::float16`;
}

/** The graph output name that carries the feature means of tensor `name` (float32, [N, features]). */
export function meansOutputName(name: string): string {
  return `${name}::means`;
}

/**
 * Returns ONNX bytes of `model` with every tensor in `names` cast to float16 and exposed as
 * `halfOutputName(name)` (the model's own outputs stay as they are). With `geometries` (one per name:
 * outer × features × inner per stimulus, graph/layout.ts), each tensor's feature means over its
 * positions are exposed too, as `meansOutputName(name)` — a Reshape that groups the positions and a
 * ReduceMean over them, in float32 before any rounding to float16. Nodes and initializers of the
 * model are untouched, so weights stay byte-identical. `options.consume`: see graph/append.ts.
 * @throws RangeError when an output name is already taken in the graph.
 */
export function exposeTensorsAsFloat16(model: LoadedModel, names: readonly string[], geometries?: readonly LayoutGeometry[], options: AppendOptions = {}): Uint8Array {
  return encodeWithAdditions(model, float16Additions(model, names, geometries), options);
}

/** What exposeTensorsAsFloat16 adds to the graph of `model` (for graph/weights-by-reference.ts's encodeForRuntime). */
export function float16Additions(model: LoadedModel, names: readonly string[], geometries?: readonly LayoutGeometry[]): GraphAdditions {
  const graph = model.proto.graph!;
  const originalNodes = graph.node ?? [];
  const originalInitializers = graph.initializer ?? [];
  const taken = new Set<string>();
  for (const node of originalNodes) for (const out of node.output ?? []) taken.add(out);
  for (const info of graph.input ?? []) taken.add(info.name ?? '');
  for (const init of originalInitializers) taken.add(init.name ?? '');
  const fresh = (name: string): string => {
    if (taken.has(name)) throw new RangeError(`tensor "${name}" already exists in ${model.fileName}`);
    taken.add(name);
    return name;
  };
  const added: NodeProto[] = [];
  const outputs: ValueInfoProto[] = [];
  const initializers: TensorProto[] = [];
  names.forEach((name, i) => {
    const half = fresh(halfOutputName(name));
    added.push({ name: `sonde_float16/${name}`, opType: 'Cast', input: [name], output: [half], attribute: [{ name: 'to', type: 2, i: FLOAT16 }] });
    outputs.push(makeValueInfo(half, FLOAT16));
    const g = geometries?.[i];
    if (!g) return;
    const shape = fresh(`sonde_means/${name}/shape`);
    const grouped = fresh(`sonde_means/${name}/grouped`);
    const means = fresh(meansOutputName(name));
    // the fewest axes: [N, F, inner] over the trailing axis (a feature map), [N, outer, F] over axis 1
    // (tokens), else [N, outer, F, inner] over 1 and 3 — the runtime's reductions are fastest on contiguous runs
    const [dims, reduce] = g.outer === 1 ? [[-1, g.features, g.inner], [2]] : g.inner === 1 ? [[-1, g.outer, g.features], [1]] : [[-1, g.outer, g.features, g.inner], [1, 3]];
    initializers.push(onnx.TensorProto.create({ name: shape, dataType: INT64, dims: [dims.length], int64Data: dims }));
    added.push({ name: `sonde_means/${name}/reshape`, opType: 'Reshape', input: [name, shape], output: [grouped] });
    if (model.opset >= 18) {
      const axes = fresh(`sonde_means/${name}/axes`);
      initializers.push(onnx.TensorProto.create({ name: axes, dataType: INT64, dims: [reduce.length], int64Data: reduce }));
      added.push({ name: `sonde_means/${name}/mean`, opType: 'ReduceMean', input: [grouped, axes], output: [means], attribute: [{ name: 'keepdims', type: 2, i: 0 }] });
    } else {
      added.push({ name: `sonde_means/${name}/mean`, opType: 'ReduceMean', input: [grouped], output: [means], attribute: [{ name: 'keepdims', type: 2, i: 0 }, { name: 'axes', type: 7, ints: reduce }] });
    }
    outputs.push(makeValueInfo(means, FLOAT32));
  });
  return { node: added, output: outputs, initializer: initializers };
}
