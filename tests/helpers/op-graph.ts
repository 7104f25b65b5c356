/**
 * Small ONNX graphs from a list of nodes, for operator-level tests of the gradient builder: seeded
 * float weights, a dynamic batch axis, one data input `x` and one output. Written to a temporary file
 * so the workflows (`senseSites`) can load them like any model.
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { createRandom } from '../../src/random.js';
import { tempFolder } from './onnx-builder.js';

const { onnx } = onnxProto;

/** One node: op type, inputs, outputs, attributes (ints, int lists, floats, strings). */
export interface OpNode {
  op: string;
  inputs: string[];
  outputs: string[];
  attributes?: Record<string, number | number[] | string | { float: number }>;
}

/** A graph: input shape per stimulus, nodes, weights (random normal × scale, or given values), output. */
export interface OpGraph {
  input: number[];
  nodes: OpNode[];
  weights?: Record<string, { dims: number[]; scale?: number; values?: number[]; int64?: boolean }>;
  output: string;
  opset?: number;
  seed?: number;
}

function attribute(name: string, value: number | number[] | string | { float: number }): onnxProto.onnx.IAttributeProto {
  const A = onnx.AttributeProto.AttributeType;
  if (typeof value === 'number') return Number.isInteger(value) ? { name, type: A.INT, i: value } : { name, type: A.FLOAT, f: value };
  if (typeof value === 'string') return { name, type: A.STRING, s: new TextEncoder().encode(value) };
  if (Array.isArray(value)) return { name, type: A.INTS, ints: value };
  return { name, type: A.FLOAT, f: value.float };
}

/** Encodes the graph as ONNX bytes. */
export function buildOpGraph(spec: OpGraph): Uint8Array {
  const random = createRandom(spec.seed ?? 7);
  const initializer = Object.entries(spec.weights ?? {}).map(([name, w]) => {
    const count = w.dims.reduce((a, b) => a * b, 1);
    if (w.int64) return { name, dims: w.dims, dataType: 7, int64Data: w.values ?? [] };
    const data = new Float32Array(count);
    for (let i = 0; i < count; i++) data[i] = w.values ? w.values[i]! : random.normal() * (w.scale ?? 0.5);
    return { name, dims: w.dims, dataType: 1, rawData: new Uint8Array(data.buffer) };
  });
  const model = onnx.ModelProto.create({
    irVersion: 8,
    opsetImport: [{ domain: '', version: spec.opset ?? 13 }],
    producerName: 'sonde-tests',
    graph: {
      name: 'op-graph',
      node: spec.nodes.map((n, i) => ({ name: `${n.op}_${i}`, opType: n.op, input: n.inputs, output: n.outputs, attribute: Object.entries(n.attributes ?? {}).map(([k, v]) => attribute(k, v)) })),
      initializer,
      input: [{ name: 'x', type: { tensorType: { elemType: 1, shape: { dim: [{ dimParam: 'batch' }, ...spec.input.map((d) => ({ dimValue: d }))] } } } }],
      output: [{ name: spec.output, type: { tensorType: { elemType: 1 } } }],
    },
  });
  return onnx.ModelProto.encode(model).finish();
}

/** Writes the graph to a temporary .onnx file and returns its path. */
export function writeOpGraph(spec: OpGraph): string {
  const path = join(tempFolder('sonde-gradient-'), 'graph.onnx');
  writeFileSync(path, buildOpGraph(spec));
  return path;
}
