/**
 * Layouts of a model's recordable tensors, read from the graph: which operators produce and consume each
 * tensor says where its features are (src/graph/layout.ts defines the kinds).
 *
 * Seeds (an operator fixes the layout of the tensors it touches):
 * - Conv, ConvTranspose, BatchNormalization, InstanceNormalization, LRN and pooling read and write
 *   channels-first maps (ONNX defines them on NCHW).
 * - MatMul with a weight (an operand that does not depend on the input) and Gemm contract the last axis:
 *   features last on both sides — tokens for [T, D], channels-last maps for [H, W, C], a vector for [D].
 * - LayerNormalization over the last axis, and ReduceMean/ReduceSum over the last axis (LayerNorm as
 *   older opsets export it), read features last.
 * - MatMul of two activations (attention scores Q·Kᵀ, weights·V) and Softmax over the last axis of a
 *   tensor of rank ≥ 3 (per stimulus) are attention internals: the heads (axis 0) are the features.
 * Propagation: elementwise operators (activations, Add/Mul/Div/Sub with an operand of the same shape,
 * Dropout, Identity, Cast, …) pass a layout between tensors of the same shape; a Transpose that keeps
 * the batch first moves the feature axis with its permutation; Concat along a position axis keeps it.
 * Seeds are placed in topological order (the first wins), then propagation runs to a fixed point.
 * Whatever is left gets the layout of its rank (`layoutFromShape`, what snapshots before layouts assumed).
 * A sidecar declaration (`layouts` in the model's JSON, src/graph/sidecar.ts) overrides all of it.
 */
import { closestHint, UsageError } from '../errors.js';
import { readAttribute } from './gradient/emit.js';
import { inferTokenGrid, layoutFromShape, type LayoutKind, type TensorLayout, type TokenGrid } from './layout.js';
import type { LoadedModel } from './load-model.js';
import type { NodeProto } from './onnx.js';
import type { GraphStructure } from './structure.js';

/** A layout declared in a model sidecar (`layouts`: tensor name → declaration). */
export interface LayoutDeclaration {
  kind: LayoutKind;
  /** Feature axis of the per-stimulus shape (batch axis dropped); defaults: 0 for channels-first, vector and heads, the last axis for tokens and channels-last. */
  featureAxis?: number;
  /** Token tensors: the patch grid (prefix tokens, then a row-major height × width grid). */
  grid?: TokenGrid;
  /** Token tensors: the number of attention heads the features split into. */
  heads?: number;
}

/** What `inferLayouts` needs to know besides the graph. */
export interface LayoutInputs {
  /** Per-stimulus shapes (batch axis dropped) of the recordable tensors. */
  shapes: ReadonlyMap<string, readonly number[]>;
  /** Node outputs that depend on the data input (the rest are weights and constants). */
  dependent: ReadonlySet<string>;
  /** Element type and full probed dims of every node output, and the probe's batch size (for head counts of tensors that are not recordable). */
  probed: ReadonlyMap<string, { type: string; dims: number[] }>;
  probeBatch: number;
  /** Declarations from the sidecar; they override what the graph says. */
  declared?: Readonly<Record<string, LayoutDeclaration>>;
  /** Sidecar path, for error messages. */
  declaredIn?: string;
}

const CHANNELS_FIRST_OPS = new Set([
  'Conv', 'ConvTranspose', 'BatchNormalization', 'InstanceNormalization', 'LRN', 'MaxPool', 'AveragePool', 'LpPool',
  'GlobalAveragePool', 'GlobalMaxPool', 'GlobalLpPool', 'DepthToSpace', 'SpaceToDepth',
]);
/** Operators whose output has the layout of every input of the same shape (unary activations, broadcast arithmetic). */
const ELEMENTWISE_OPS = new Set([
  'Relu', 'LeakyRelu', 'PRelu', 'Elu', 'Selu', 'Celu', 'Sigmoid', 'HardSigmoid', 'HardSwish', 'Tanh', 'Softplus', 'Softsign',
  'Gelu', 'Mish', 'Clip', 'ThresholdedRelu', 'Erf', 'Exp', 'Log', 'Sqrt', 'Abs', 'Neg', 'Reciprocal', 'Identity', 'Dropout',
  'Cast', 'Pow', 'Add', 'Sub', 'Mul', 'Div', 'Max', 'Min', 'Sum', 'Mean', 'Where', 'Floor', 'Ceil', 'Round', 'Sign',
  'BatchNormalization', 'LayerNormalization', 'InstanceNormalization', 'Softmax', 'LogSoftmax',
]);
const LAST_AXIS_REDUCTIONS = new Set(['ReduceMean', 'ReduceSum', 'ReduceL2', 'ReduceSumSquare']);

/**
 * The layout of every recordable tensor (keys of `inputs.shapes`), from the graph and the sidecar.
 * @throws UsageError when a sidecar declaration names a tensor that is not recordable or does not fit
 *   the tensor's shape (the message names the tensor, the value and the shape).
 */
export function inferLayouts(model: LoadedModel, structure: GraphStructure, inputs: LayoutInputs): Map<string, TensorLayout> {
  const { shapes, dependent } = inputs;
  const protoOf = new Map<string, NodeProto>();
  for (const node of model.proto.graph?.node ?? []) if (node.output?.[0]) protoOf.set(node.output[0], node);
  const found = new Map<string, TensorLayout>();
  const shapeOf = (name: string | undefined): readonly number[] | null => (name ? shapes.get(name) ?? null : null);
  const seed = (name: string | undefined, layout: (shape: readonly number[]) => TensorLayout | null): void => {
    const shape = shapeOf(name);
    if (!shape || found.has(name!)) return;
    const l = layout(shape);
    if (l) found.set(name!, l);
  };

  for (const node of structure.nodes) {
    const proto = node.outputs[0] ? protoOf.get(node.outputs[0]) : undefined;
    const [a, b] = node.inputs;
    const y = node.outputs[0];
    const rank = (name: string | undefined) => shapeOf(name)?.length ?? -1;
    if (CHANNELS_FIRST_OPS.has(node.opType)) {
      seed(a, featuresFirst);
      seed(y, featuresFirst);
    } else if (node.opType === 'MatMul' || node.opType === 'Gemm') {
      const aData = !!a && dependent.has(a);
      const bData = !!b && dependent.has(b);
      if (aData && !bData) {
        seed(a, featuresLast);
        seed(y, featuresLast);
      } else if (node.opType === 'MatMul' && aData && bData && rank(y) >= 3) {
        for (const t of [y, a, b]) seed(t, (s) => (s.length >= 3 ? headsAt(s, 0) : null));
      }
    } else if (node.opType === 'LayerNormalization' && proto) {
      const r = rank(a);
      if (r >= 1 && positiveAxis(readAttribute(proto, 'axis', -1), r + 1) === r) {
        seed(a, featuresLast);
        seed(y, featuresLast);
      }
    } else if (LAST_AXIS_REDUCTIONS.has(node.opType) && proto) {
      const r = rank(a);
      const axes = readAttribute<number[] | null>(proto, 'axes', null);
      if (r >= 1 && axes && axes.length === 1 && positiveAxis(axes[0]!, r + 1) === r) {
        seed(a, featuresLast);
        if (readAttribute(proto, 'keepdims', 1) === 1) seed(y, featuresLast); // one feature per position: LayerNorm's statistics
      }
    } else if ((node.opType === 'Softmax' || node.opType === 'LogSoftmax') && proto && rank(y) >= 3) {
      const r = rank(y);
      if (positiveAxis(readAttribute(proto, 'axis', -1), r + 1) === r) seed(y, (s) => headsAt(s, 0));
    }
  }
  propagate(structure, protoOf, shapes, found);

  const layouts = new Map<string, TensorLayout>();
  const grids = mapGrids(shapes, found);
  for (const [name, shape] of shapes) {
    let layout = found.get(name) ?? layoutFromShape(shape);
    if (layout.kind === 'tokens') {
      const grid = tokenGrid(shape[0]!, grids);
      const heads = headCount(name, structure, inputs);
      layout = { ...layout, ...(grid ? { grid } : {}), ...(heads !== null && shape[1]! % heads === 0 ? { heads } : {}) };
    }
    layouts.set(name, layout);
  }
  for (const [name, declaration] of Object.entries(inputs.declared ?? {})) {
    const shape = shapes.get(name);
    const where = inputs.declaredIn ? `model sidecar ${inputs.declaredIn}` : 'model sidecar';
    if (!shape) {
      throw new UsageError('E_SIDECAR', `${where}: layouts names "${name}", which is not a recordable tensor of ${model.fileName}`, { hint: closestHint(name, [...shapes.keys()]) || 'run `sonde layers MODEL` for the names' });
    }
    layouts.set(name, declaredLayout(name, shape, declaration, where));
  }
  return layouts;
}

/** Turns a sidecar declaration into a layout, checking it against the tensor's shape. */
export function declaredLayout(name: string, shape: readonly number[], d: LayoutDeclaration, where: string): TensorLayout {
  const dims = `[${shape.join(', ')}]`;
  const fail = (what: string, hint: string): never => {
    throw new UsageError('E_SIDECAR', `${where}: layouts."${name}" ${what} (per-stimulus shape ${dims})`, { hint });
  };
  const r = shape.length;
  if (d.kind === 'scalar') {
    if (r !== 0) fail(`is declared scalar but has ${r} axes`, 'declare a kind that fits the shape, e.g. "vector" or "tokens"');
    return { kind: 'scalar', featureAxis: null, source: 'sidecar' };
  }
  const minRank = d.kind === 'vector' ? 1 : 2;
  if (r < minRank || (d.kind === 'vector' && r !== 1) || (d.kind === 'tokens' && r !== 2)) {
    fail(`is declared ${d.kind} but has ${r} ax${r === 1 ? 'is' : 'es'}`, d.kind === 'tokens' ? 'tokens are [T, D] per stimulus' : d.kind === 'vector' ? 'a vector is [D] per stimulus' : 'maps and heads have at least 2 axes per stimulus');
  }
  const axis = d.featureAxis ?? (d.kind === 'tokens' || d.kind === 'channels-last' ? r - 1 : 0);
  if (!Number.isInteger(axis) || axis < 0 || axis >= r) fail(`has featureAxis ${axis}, outside 0…${r - 1}`, 'count axes without the batch axis');
  if (d.kind === 'tokens' && axis !== 1) fail('is declared tokens with featureAxis 0', 'tokens have features on the last axis; declare "channels-first" for [D, T]');
  const layout: TensorLayout = { kind: d.kind, featureAxis: axis, source: 'sidecar' };
  if (d.grid) {
    if (d.kind !== 'tokens') fail(`declares a grid but is ${d.kind}`, 'grids are for token tensors');
    const { prefix, height, width } = d.grid;
    if (prefix + height * width !== shape[0]) fail(`has grid ${prefix}+${height}×${width} = ${prefix + height * width} tokens, not ${shape[0]}`, 'prefix + height·width must equal the token count');
    layout.grid = { prefix, height, width };
  } else if (d.kind === 'tokens') {
    const grid = inferTokenGrid(shape[0]!);
    if (grid) layout.grid = grid;
  }
  if (d.heads !== undefined) {
    if (d.kind !== 'tokens') fail(`declares heads but is ${d.kind}`, 'heads split the features of token tensors; a "heads" layout has them on its feature axis');
    if (shape[axis]! % d.heads !== 0) fail(`declares ${d.heads} heads, which do not divide ${shape[axis]} features`, 'heads must divide the feature count');
    layout.heads = d.heads;
  }
  return layout;
}

function featuresFirst(shape: readonly number[]): TensorLayout {
  return shape.length <= 1 ? layoutFromShape(shape) : { kind: 'channels-first', featureAxis: 0, source: 'graph' };
}

function featuresLast(shape: readonly number[]): TensorLayout {
  if (shape.length === 0) return { kind: 'scalar', featureAxis: null, source: 'graph' };
  if (shape.length === 1) return { kind: 'vector', featureAxis: 0, source: 'graph' };
  return { kind: shape.length === 2 ? 'tokens' : 'channels-last', featureAxis: shape.length - 1, source: 'graph' };
}

function headsAt(_shape: readonly number[], axis: number): TensorLayout {
  return { kind: 'heads', featureAxis: axis, source: 'graph' };
}

/** The layout of a tensor whose feature axis sits at `axis` (after a transpose). */
function layoutAt(shape: readonly number[], axis: number, wasHeads: boolean): TensorLayout {
  if (wasHeads) return headsAt(shape, axis);
  if (shape.length === 1) return { kind: 'vector', featureAxis: 0, source: 'graph' };
  if (axis === shape.length - 1) return featuresLast(shape);
  return { kind: 'channels-first', featureAxis: axis, source: 'graph' };
}

function positiveAxis(axis: number, rank: number): number {
  return axis < 0 ? axis + rank : axis;
}

/** Spreads found layouts through shape-preserving operators, Transposes that keep the batch first, and Concats. */
function propagate(structure: GraphStructure, protoOf: ReadonlyMap<string, NodeProto>, shapes: ReadonlyMap<string, readonly number[]>, found: Map<string, TensorLayout>): void {
  const same = (s: readonly number[] | undefined, t: readonly number[] | undefined) => !!s && !!t && s.length === t.length && s.every((d, i) => d === t[i]);
  for (let changed = true; changed; ) {
    changed = false;
    const give = (name: string, layout: TensorLayout) => {
      if (found.has(name) || !shapes.has(name)) return;
      found.set(name, { ...layout, source: 'graph' });
      changed = true;
    };
    for (const node of structure.nodes) {
      const y = node.outputs[0];
      if (!y || !shapes.has(y)) continue;
      const yShape = shapes.get(y)!;
      const data = node.inputs.filter((i) => i && shapes.has(i));
      if (ELEMENTWISE_OPS.has(node.opType)) {
        const group = [y, ...data.filter((i) => same(shapes.get(i), yShape))];
        const known = group.map((t) => found.get(t)).find((l) => l !== undefined);
        if (known) for (const t of group) give(t, known);
      } else if (node.opType === 'Transpose') {
        const x = node.inputs[0]!;
        const proto = protoOf.get(y);
        const xShape = shapes.get(x);
        if (!proto || !xShape) continue;
        const perm = readAttribute<number[] | null>(proto, 'perm', null) ?? [...Array(xShape.length + 1).keys()].reverse();
        if (perm[0] !== 0 || perm.length !== xShape.length + 1) continue; // the batch must stay first
        const xl = found.get(x);
        const yl = found.get(y);
        if (xl && xl.featureAxis !== null && !yl) give(y, layoutAt(yShape, perm.indexOf(xl.featureAxis + 1) - 1, xl.kind === 'heads'));
        else if (yl && yl.featureAxis !== null && !xl) give(x, layoutAt(xShape, perm[yl.featureAxis + 1]! - 1, yl.kind === 'heads'));
      } else if (node.opType === 'Concat') {
        const proto = protoOf.get(y);
        if (!proto) continue;
        const axis = positiveAxis(readAttribute(proto, 'axis', 0), yShape.length + 1) - 1;
        const group = [y, ...data.filter((i) => shapes.get(i)!.length === yShape.length)];
        const known = group.map((t) => found.get(t)).find((l) => l !== undefined && l.featureAxis !== axis);
        if (known && axis >= 0) for (const t of group) give(t, known);
      }
    }
  }
}

/** Height × width of the channels-first maps of the model (patch embeddings), largest first. */
function mapGrids(shapes: ReadonlyMap<string, readonly number[]>, found: ReadonlyMap<string, TensorLayout>): Array<[number, number]> {
  const grids = new Map<string, [number, number]>();
  for (const [name, shape] of shapes) {
    if (shape.length === 3 && found.get(name)?.kind === 'channels-first') grids.set(`${shape[1]}x${shape[2]}`, [shape[1]!, shape[2]!]);
  }
  return [...grids.values()].sort((p, q) => q[0] * q[1] - p[0] * p[1]);
}

/** The grid of T tokens: a map of the model with T − p positions (p ≤ 8 prefix tokens) when there is one, else the square rule. */
function tokenGrid(tokens: number, grids: ReadonlyArray<[number, number]>): TokenGrid | null {
  for (let prefix = 0; prefix <= 8 && prefix < tokens; prefix++) {
    const match = grids.find(([h, w]) => h * w === tokens - prefix && h * w >= 4);
    if (match) return { prefix, height: match[0], width: match[1] };
  }
  return inferTokenGrid(tokens);
}

/** Operators an attention output passes through between the head-weighted sum and the residual Add. */
const HEAD_PATH_OPS = new Set(['Transpose', 'Reshape', 'Gemm', 'MatMul', 'Add', 'Identity', 'Dropout', 'Flatten']);

/**
 * Heads of a token tensor that comes from a multi-head attention: walking back at most 8 nodes through
 * reshapes, transposes and weighted projections (one operand depending on the input), the MatMul of
 * attention weights and values gives H — its leading axis [N, H, T, d], or the batch merged with the
 * heads [N·H, T, d]. Null otherwise (the residual Add has two activation operands and stops the walk).
 */
function headCount(name: string, structure: GraphStructure, inputs: LayoutInputs): number | null {
  let current = name;
  for (let step = 0; step < 8; step++) {
    const at = structure.producer.get(current);
    if (at === undefined) return null;
    const node = structure.nodes[at]!;
    // activations only: a Reshape's shape operand depends on the input too, but is int64
    const data = node.inputs.filter((i) => i && inputs.dependent.has(i) && inputs.probed.get(i)?.type !== 'int64' && inputs.probed.get(i)?.type !== 'int32');
    if (node.opType === 'MatMul' && data.length === 2) {
      const dims = inputs.probed.get(node.outputs[0]!)?.dims;
      if (!dims || dims.length < 3) return null;
      const batch = inputs.probeBatch;
      if (dims.length >= 4 && dims[0] === batch) return dims[1]!;
      if (dims[0]! % batch === 0 && dims[0]! > batch) return dims[0]! / batch;
      return null;
    }
    if (!HEAD_PATH_OPS.has(node.opType) || data.length !== 1) return null;
    current = data[0]!;
  }
  return null;
}
