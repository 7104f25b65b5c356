/**
 * Builds small ONNX models in TypeScript for tests (no Python needed in CI). The models are
 * deliberately tiny; weights come from a seeded generator.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { createRandom } from '../../src/random.js';

const { onnx } = onnxProto;

export interface TinyNetOptions {
  /** Input channels, height, width. */
  input?: [number, number, number];
  /** Conv widths. */
  widths?: number[];
  classes?: number;
  seed?: number;
  /** Add biases (breaks positive homogeneity). */
  bias?: boolean;
  /** Batch axis name, or a fixed number. */
  batch?: string | number;
  /** Spatial axes dynamic. */
  dynamicSpatial?: boolean;
  /** Store weights in an external data file next to the model. */
  externalData?: boolean;
  /** Add a residual Add around the second conv (same width required). */
  residual?: boolean;
  /**
   * Add Constant nodes: a per-channel scale `scale0` [1, W0, 1, 1] multiplied into conv0 (tensor
   * `scaled0`, read by relu0), and a second graph output `prior` [2, classes] = `prior_c` + `prior_c`
   * computed from Constants only (not per stimulus, its first axis merely looks like a batch of 2).
   */
  constants?: boolean;
}

function tensor(name: string, dims: number[], data: Float32Array): onnxProto.onnx.ITensorProto {
  return { name, dims, dataType: 1, rawData: new Uint8Array(data.buffer, data.byteOffset, data.byteLength) };
}

/**
 * conv(3x3, pad 1) → relu → [maxpool 2] per width, global average pool → flatten → matmul (→ add bias).
 * Tensor names: conv{i}, relu{i}, pool{i}, gap, flat, logits.
 */
export function buildTinyNet(options: TinyNetOptions = {}): Uint8Array {
  const [c0, h0, w0] = options.input ?? [3, 16, 16];
  const widths = options.widths ?? [4, 6, 8];
  const classes = options.classes ?? 5;
  const rng = createRandom(options.seed ?? 1);
  const nodes: onnxProto.onnx.INodeProto[] = [];
  const inits: onnxProto.onnx.ITensorProto[] = [];
  let prev = 'input';
  let channels = c0;
  widths.forEach((width, i) => {
    const w = new Float32Array(width * channels * 9).map(() => rng.normal() * Math.sqrt(2 / (channels * 9)));
    inits.push(tensor(`W${i}`, [width, channels, 3, 3], w));
    const convInputs = [prev, `W${i}`];
    if (options.bias) {
      inits.push(tensor(`B${i}`, [width], new Float32Array(width).map(() => rng.normal() * 0.1)));
      convInputs.push(`B${i}`);
    }
    nodes.push({ name: `conv${i}_node`, opType: 'Conv', input: convInputs, output: [`conv${i}`], attribute: [{ name: 'pads', type: 7, ints: [1, 1, 1, 1] }] });
    let act = `conv${i}`;
    if (options.constants && i === 0) {
      nodes.push({ name: 'scale0_node', opType: 'Constant', input: [], output: ['scale0'], attribute: [{ name: 'value', type: 4, t: tensor('', [1, width, 1, 1], new Float32Array(width).map((_, k) => 1 + 0.25 * k)) }] });
      nodes.push({ name: 'scaled0_node', opType: 'Mul', input: ['conv0', 'scale0'], output: ['scaled0'] });
      act = 'scaled0';
    }
    if (options.residual && i === 1 && width === channels) {
      nodes.push({ name: `res_node`, opType: 'Add', input: [`conv${i}`, prev], output: ['res'] });
      act = 'res';
    }
    nodes.push({ name: `relu${i}_node`, opType: 'Relu', input: [act], output: [`relu${i}`] });
    prev = `relu${i}`;
    if (i < widths.length - 1) {
      nodes.push({ name: `pool${i}_node`, opType: 'MaxPool', input: [prev], output: [`pool${i}`], attribute: [{ name: 'kernel_shape', type: 7, ints: [2, 2] }, { name: 'strides', type: 7, ints: [2, 2] }] });
      prev = `pool${i}`;
    }
    channels = width;
  });
  nodes.push({ name: 'gap_node', opType: 'GlobalAveragePool', input: [prev], output: ['gap'] });
  nodes.push({ name: 'flat_node', opType: 'Flatten', input: ['gap'], output: ['flat'] });
  inits.push(tensor('Wfc', [channels, classes], new Float32Array(channels * classes).map(() => rng.normal())));
  if (options.bias) {
    nodes.push({ name: 'fc_node', opType: 'MatMul', input: ['flat', 'Wfc'], output: ['fc'] });
    inits.push(tensor('Bfc', [classes], new Float32Array(classes).map(() => rng.normal())));
    nodes.push({ name: 'fcb_node', opType: 'Add', input: ['fc', 'Bfc'], output: ['logits'] });
  } else nodes.push({ name: 'fc_node', opType: 'MatMul', input: ['flat', 'Wfc'], output: ['logits'] });
  if (options.constants) {
    nodes.push({ name: 'prior_c_node', opType: 'Constant', input: [], output: ['prior_c'], attribute: [{ name: 'value', type: 4, t: tensor('', [2, classes], new Float32Array(2 * classes).map((_, k) => k)) }] });
    nodes.push({ name: 'prior_node', opType: 'Add', input: ['prior_c', 'prior_c'], output: ['prior'] });
  }
  const batch = options.batch ?? 'batch';
  const dim = (d: string | number) => (typeof d === 'number' ? { dimValue: d } : { dimParam: d });
  const inputDims = [dim(batch), dim(c0), dim(options.dynamicSpatial ? 'height' : h0), dim(options.dynamicSpatial ? 'width' : w0)];
  const model: onnxProto.onnx.IModelProto = {
    irVersion: 8,
    opsetImport: [{ domain: '', version: 13 }],
    producerName: 'sonde-tests',
    graph: {
      name: 'tiny',
      node: nodes,
      initializer: inits,
      input: [{ name: 'input', type: { tensorType: { elemType: 1, shape: { dim: inputDims } } } }],
      output: [{ name: 'logits', type: { tensorType: { elemType: 1, shape: { dim: [dim(batch), dim(classes)] } } } }, ...(options.constants ? [{ name: 'prior', type: { tensorType: { elemType: 1, shape: { dim: [dim(2), dim(classes)] } } } }] : [])],
    },
  };
  return onnx.ModelProto.encode(model).finish();
}

/** Moves every initializer of `bytes` into one external file `weights.bin` in `folder`; returns model bytes. */
export function externalise(bytes: Uint8Array, folder: string, fileName = 'weights.bin'): Uint8Array {
  const model = onnx.ModelProto.decode(bytes);
  const chunks: Uint8Array[] = [];
  let offset = 0;
  for (const t of model.graph!.initializer!) {
    const raw = t.rawData!;
    chunks.push(raw.slice());
    t.externalData = [
      { key: 'location', value: fileName },
      { key: 'offset', value: String(offset) },
      { key: 'length', value: String(raw.length) },
    ];
    t.dataLocation = 1;
    t.rawData = new Uint8Array(0);
    offset += raw.length;
  }
  const all = new Uint8Array(offset);
  let at = 0;
  for (const c of chunks) {
    all.set(c, at);
    at += c.length;
  }
  writeFileSync(join(folder, fileName), all);
  return onnx.ModelProto.encode(model).finish();
}

/** A fresh temporary folder. */
export function tempFolder(prefix = 'sonde-test-'): string {
  return mkdtempSync(join(tmpdir(), prefix));
}

/** Writes a float32 .npy [N,C,H,W] of seeded uniform values in [0,1), and a labels CSV; returns both paths. */
export function writeStimuliNpy(folder: string, shape: [number, number, number, number], seed = 3, labels?: string[]): { npy: string; labels: string } {
  const [n, c, h, w] = shape;
  const rng = createRandom(seed);
  const data = new Float32Array(n * c * h * w).map(() => rng.uniform());
  const header = `{'descr': '<f4', 'fortran_order': False, 'shape': (${n}, ${c}, ${h}, ${w}), }`;
  const pad = (64 - ((10 + header.length + 1) % 64)) % 64;
  const text = header + ' '.repeat(pad) + '\n';
  const out = new Uint8Array(10 + text.length + data.byteLength);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0], 0);
  new DataView(out.buffer).setUint16(8, text.length, true);
  for (let i = 0; i < text.length; i++) out[10 + i] = text.charCodeAt(i);
  out.set(new Uint8Array(data.buffer), 10 + text.length);
  const npy = join(folder, 'stimuli.npy');
  writeFileSync(npy, out);
  const labelPath = join(folder, 'labels.csv');
  const list = labels ?? Array.from({ length: n }, (_, i) => ['cat', 'dog', 'cat;dog'][i % 3]!);
  writeFileSync(labelPath, `label\n${list.join('\n')}\n`);
  return { npy, labels: labelPath };
}

/** Runs the CLI in-process and captures output. */
export async function runSonde(args: string[]): Promise<{ code: number; stdout: string; stderr: string }> {
  const { runCli } = await import('../../src/cli/run.js');
  let stdout = '';
  let stderr = '';
  const code = await runCli(args, { stdout: (t) => (stdout += t), stderr: (t) => (stderr += t) });
  return { code, stdout, stderr };
}

/** Every activation of a layer stream, concatenated in stimulus order (copies each batch). */
export async function concatActivations(batches: AsyncIterable<{ activation: Float32Array | null }>): Promise<Float32Array> {
  const parts: Float32Array[] = [];
  for await (const batch of batches) parts.push(batch.activation!.slice());
  const out = new Float32Array(parts.reduce((n, p) => n + p.length, 0));
  let at = 0;
  for (const p of parts) {
    out.set(p, at);
    at += p.length;
  }
  return out;
}
