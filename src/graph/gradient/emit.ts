/**
 * The node writer of the gradient builder: fresh tensor names, constants as initializers, attribute
 * protos, and the few operators whose form changed between opsets (ReduceSum, Unsqueeze, Squeeze take
 * their axes as an attribute before opset 13 and as an input from 13; ReduceMean from 18). Everything it
 * writes is a standard ONNX operator of the model's own opset, so the gradient graph runs in the plain
 * CPU runtime (no training build).
 */
import { onnx, toNumber, type AttributeProto, type NodeProto, type TensorProto } from '../onnx.js';

/** Attribute values the builder writes: an int, a float, a list of ints, a list of floats or a string. */
export type AttributeValue = number | number[] | string | { floats: number[] } | { float: number };

/** ONNX TensorProto data types used here (onnx.proto3). */
export const FLOAT = 1;
export const INT64 = 7;

/** Writes the backward nodes and their constants. */
export class Emitter {
  readonly nodes: NodeProto[] = [];
  readonly initializers: TensorProto[] = [];
  private counter = 0;

  /** @param opset the model's default-domain opset (the form of version-dependent operators follows it). */
  constructor(readonly opset: number, private readonly prefix = 'sonde.grad') {}

  /** A fresh tensor name (`hint` makes graphs readable when dumped). */
  fresh(hint: string): string {
    return `${this.prefix}/${hint}#${this.counter++}`;
  }

  /** Adds a node with `outputs` fresh outputs and returns their names. */
  emitMany(opType: string, inputs: readonly string[], outputs: number, attributes: Record<string, AttributeValue> = {}, hint = opType): string[] {
    const names = Array.from({ length: outputs }, () => this.fresh(hint));
    this.nodes.push({
      name: this.fresh(`${opType}-node`),
      opType,
      domain: '',
      input: [...inputs],
      output: names,
      attribute: Object.entries(attributes).map(([name, value]) => attribute(name, value)),
    });
    return names;
  }

  /** Adds a one-output node and returns its output name. */
  emit(opType: string, inputs: readonly string[], attributes: Record<string, AttributeValue> = {}, hint = opType): string {
    return this.emitMany(opType, inputs, 1, attributes, hint)[0]!;
  }

  /** A float32 constant (an initializer) of the given dims. */
  floats(values: ArrayLike<number>, dims: readonly number[] = [values.length]): string {
    const name = this.fresh('const');
    this.initializers.push(onnx.TensorProto.create({ name, dataType: FLOAT, dims: [...dims], floatData: Array.from(values) }));
    return name;
  }

  /** An int64 constant (an initializer) of the given dims. */
  ints(values: ArrayLike<number>, dims: readonly number[] = [values.length]): string {
    const name = this.fresh('const');
    this.initializers.push(onnx.TensorProto.create({ name, dataType: INT64, dims: [...dims], int64Data: Array.from(values) }));
    return name;
  }

  /** A float32 scalar constant. */
  scalar(value: number): string {
    return this.floats([value], []);
  }

  /** ReduceSum over `axes` (axes as an attribute before opset 13, as an input from 13). */
  reduceSum(x: string, axes: readonly number[], keepdims: boolean): string {
    if (axes.length === 0) return x;
    if (this.opset >= 13) return this.emit('ReduceSum', [x, this.ints(axes)], { keepdims: keepdims ? 1 : 0 });
    return this.emit('ReduceSum', [x], { axes: [...axes], keepdims: keepdims ? 1 : 0 });
  }

  /** ReduceMean over `axes` (an input from opset 18). */
  reduceMean(x: string, axes: readonly number[], keepdims: boolean): string {
    if (this.opset >= 18) return this.emit('ReduceMean', [x, this.ints(axes)], { keepdims: keepdims ? 1 : 0 });
    return this.emit('ReduceMean', [x], { axes: [...axes], keepdims: keepdims ? 1 : 0 });
  }

  /** Unsqueeze at `axes` (an input from opset 13). */
  unsqueeze(x: string, axes: readonly number[]): string {
    if (axes.length === 0) return x;
    if (this.opset >= 13) return this.emit('Unsqueeze', [x, this.ints(axes)]);
    return this.emit('Unsqueeze', [x], { axes: [...axes] });
  }

  /** Reshape to the runtime shape of `like` (same number of elements). */
  reshapeLike(x: string, like: string): string {
    return this.emit('Reshape', [x, this.emit('Shape', [like])]);
  }

  /** A float32 tensor of zeros shaped like `like` at run time. */
  zerosLike(like: string): string {
    return this.emit('ConstantOfShape', [this.emit('Shape', [like])], { value: { float: 0 } } as Record<string, AttributeValue>);
  }

  /** Cast a boolean to float32. */
  toFloat(x: string): string {
    return this.emit('Cast', [x], { to: FLOAT });
  }
}

function attribute(name: string, value: AttributeValue): AttributeProto {
  const A = onnx.AttributeProto.AttributeType;
  if (typeof value === 'number') return { name, type: A.INT, i: value };
  if (typeof value === 'string') return { name, type: A.STRING, s: new TextEncoder().encode(value) };
  if (Array.isArray(value)) return { name, type: A.INTS, ints: value };
  if ('floats' in value) return { name, type: A.FLOATS, floats: value.floats };
  // ConstantOfShape's `value` is a one-element tensor
  if (name === 'value') return { name, type: A.TENSOR, t: onnx.TensorProto.create({ dataType: FLOAT, dims: [1], floatData: [value.float] }) };
  return { name, type: A.FLOAT, f: value.float };
}

/** Reads a node attribute: int, ints, float, floats or string; `fallback` when absent. */
export function readAttribute<T extends number | number[] | string | null>(node: NodeProto, name: string, fallback: T): T extends number ? number : T extends string ? string : T {
  return readAny(node, name, fallback) as never;
}

function readAny(node: NodeProto, name: string, fallback: unknown): unknown {
  const found = (node.attribute ?? []).find((a) => a.name === name);
  if (!found) return fallback;
  const A = onnx.AttributeProto.AttributeType;
  switch (found.type) {
    case A.INT:
      return toNumber(found.i);
    case A.INTS:
      return (found.ints ?? []).map((v) => toNumber(v));
    case A.FLOAT:
      return found.f ?? 0;
    case A.FLOATS:
      return (found.floats ?? []).slice();
    case A.STRING:
      return new TextDecoder().decode(found.s ?? new Uint8Array());
    default:
      return fallback;
  }
}

/** Decodes the numbers of a float/int tensor proto (typed fields or little-endian raw data). */
export function tensorValues(tensor: TensorProto): number[] {
  const raw = tensor.rawData;
  const type = tensor.dataType ?? 0;
  if (raw && raw.length > 0) {
    const view = new DataView(raw.buffer, raw.byteOffset, raw.byteLength);
    const out: number[] = [];
    const size = type === 1 || type === 6 ? 4 : type === 7 || type === 11 ? 8 : type === 9 || type === 2 || type === 3 ? 1 : 0;
    for (let i = 0; size > 0 && i + size <= raw.length; i += size) {
      out.push(type === 1 ? view.getFloat32(i, true) : type === 6 ? view.getInt32(i, true) : type === 7 ? Number(view.getBigInt64(i, true)) : type === 11 ? view.getFloat64(i, true) : type === 3 ? view.getInt8(i) : view.getUint8(i));
    }
    return out;
  }
  if (type === 1) return (tensor.floatData ?? []).slice();
  if (type === 11) return (tensor.doubleData ?? []).slice();
  if (type === 7) return (tensor.int64Data ?? []).map((v) => toNumber(v));
  return (tensor.int32Data ?? []).slice();
}
