/**
 * buildGradientGraph, operator by operator and on random smooth networks, against central differences
 * of the forward graph (an exact property: for a smooth function the derivative is the limit of the
 * central difference, whose error is O(h²) — Richardson's (4·D(h/2) − D(h))/3 is O(h⁴) — plus float32
 * rounding ~ ε·|y|/h). The finite differences are Sonde's own `--method richardson` through the same
 * session code, so this also checks that the finite-difference path agrees with the exact one away from
 * kinks. Operators with kinks (ReLU, Clip, MaxPool, HardSwish…) are fed seeded data whose values lie far
 * from their kinks compared with the step, and the tolerance says so.
 */
import { dirname } from 'node:path';
import { describe, expect, it } from 'vitest';
import { GRADIENT_RULES } from '../../../src/graph/gradient/build.js';
import { senseSites } from '../../../src/replay/sense.js';
import { createRandom } from '../../../src/random.js';
import { writeStimuliNpy } from '../../helpers/onnx-builder.js';
import { writeOpGraph, type OpGraph, type OpNode } from '../../helpers/op-graph.js';

/** max over entries of |exact − richardson| / (largest |richardson| of the entry's category). */
async function disagreement(spec: OpGraph, options: { step?: number; stimuli?: number; method?: 'richardson' | 'secant' } = {}): Promise<{ gain: number; offset: number }> {
  const path = writeOpGraph(spec);
  const { npy } = writeStimuliNpy(dirname(path), [options.stimuli ?? 3, ...spec.input] as [number, number, number, number], 11);
  const out = { gain: 0, offset: 0 };
  for (const kind of ['gain', 'offset'] as const) {
    const exact = (await senseSites({ model: path, stimuli: npy, site: 's', kind, threads: 1 })).sites[0]!;
    const fd = (await senseSites({ model: path, stimuli: npy, site: 's', kind, threads: 1, method: options.method ?? 'richardson', step: options.step ?? 1e-2 })).sites[0]!;
    expect(exact.method).toBe('exact');
    const K = exact.categories.length;
    const C = exact.channels;
    for (let c = 0; c < K; c++) {
      let largest = 0;
      for (let k = 0; k < C; k++) largest = Math.max(largest, Math.abs(fd.sensitivity[k * K + c]!));
      expect(largest, `${kind}: category ${c} has a scale`).toBeGreaterThan(0);
      for (let k = 0; k < C; k++) out[kind] = Math.max(out[kind], Math.abs(exact.sensitivity[k * K + c]! - fd.sensitivity[k * K + c]!) / largest);
    }
  }
  return out;
}

/** A head that turns [N, C, H, W] into [N, 3] logits: global average pool, flatten, Gemm. */
function head(from: string, channels: number): { nodes: OpNode[]; weights: OpGraph['weights'] } {
  return {
    nodes: [
      { op: 'GlobalAveragePool', inputs: [from], outputs: ['head.pool'] },
      { op: 'Flatten', inputs: ['head.pool'], outputs: ['head.flat'] },
      { op: 'Gemm', inputs: ['head.flat', 'head.w', 'head.b'], outputs: ['y'], attributes: { transB: 1 } },
    ],
    weights: { 'head.w': { dims: [3, channels] }, 'head.b': { dims: [3] } },
  };
}

/** Site s = x·k + 0.1 (k a weight near 1, so the site is a node output), then `body`, then the head. */
function net(C: number, H: number, W: number, body: OpNode[], last: string, lastChannels: number, weights: OpGraph['weights'] = {}, opset = 13): OpGraph {
  const h = head(last, lastChannels);
  return {
    input: [C, H, W],
    nodes: [{ op: 'Mul', inputs: ['x', 'k'], outputs: ['s0'] }, { op: 'Add', inputs: ['s0', 'shift'], outputs: ['s'] }, ...body, ...h.nodes],
    weights: { k: { dims: [1, C, 1, 1], values: Array.from({ length: C }, (_, i) => 1 + 0.1 * i) }, shift: { dims: [1], values: [0.1] }, ...weights, ...h.weights },
    output: 'y',
    opset,
  };
}

/** Smooth operators only: tolerance for Richardson at h = 1e-2 in float32 (measured ≤ 2e-4 here). */
const SMOOTH = 2e-3;

describe('buildGradientGraph on random smooth networks (Sigmoid, Tanh, Softmax, Erf; no kinks)', () => {
  for (const seed of [1, 2, 3, 4]) {
    it(`buildGradientGraph matches central differences of the forward graph on random network ${seed}`, async () => {
      const random = createRandom(seed * 97);
      const C = 4 + Math.floor(random.uniform() * 4);
      const nodes: OpNode[] = [];
      const weights: NonNullable<OpGraph['weights']> = {};
      let from = 's';
      let channels = C;
      let size = 8;
      for (let layer = 0; layer < 3; layer++) {
        const width = 3 + Math.floor(random.uniform() * 6);
        const stride = random.uniform() < 0.5 ? 1 : 2;
        const dilation = random.uniform() < 0.3 ? 2 : 1;
        const pad = Math.floor(random.uniform() * 2);
        const group = channels % 2 === 0 && width % 2 === 0 && random.uniform() < 0.4 ? 2 : 1;
        const name = `conv${layer}`;
        nodes.push({ op: 'Conv', inputs: [from, `${name}.w`, `${name}.b`], outputs: [name], attributes: { kernel_shape: [3, 3], strides: [stride, stride], pads: [pad, pad, pad, pad], dilations: [dilation, dilation], group } });
        weights[`${name}.w`] = { dims: [width, channels / group, 3, 3], scale: 0.6 };
        weights[`${name}.b`] = { dims: [width], scale: 0.2 };
        const act = ['Sigmoid', 'Tanh', 'Erf'][layer % 3]!;
        nodes.push({ op: act, inputs: [name], outputs: [`${name}.act`] });
        from = `${name}.act`;
        channels = width;
        size = Math.floor((size + 2 * pad - dilation * 2 - 1) / stride) + 1;
        if (size < 3) break;
      }
      // a channel softmax (opset 13: one axis) multiplied back in: smooth, and mixes channels
      nodes.push({ op: 'Softmax', inputs: [from], outputs: ['soft'], attributes: { axis: 1 } }, { op: 'Mul', inputs: ['soft', from], outputs: ['mixed'] });
      const d = await disagreement(net(C, 8, 8, nodes, 'mixed', channels, weights));
      expect(d.gain).toBeLessThanOrEqual(SMOOTH);
      expect(d.offset).toBeLessThanOrEqual(SMOOTH);
    });
  }
});

describe('buildGradientGraph operator rules vs central differences', () => {
  const cases: Array<{ name: string; graph: () => OpGraph; bound?: number; step?: number; method?: 'secant' }> = [
    {
      name: 'ConvTranspose (stride 2, pads, output_padding) and Sigmoid',
      graph: () => net(4, 5, 5, [{ op: 'ConvTranspose', inputs: ['s', 'ct.w'], outputs: ['ct'], attributes: { kernel_shape: [3, 3], strides: [2, 2], pads: [1, 1, 1, 1], output_padding: [1, 1] } }, { op: 'Sigmoid', inputs: ['ct'], outputs: ['a'] }], 'a', 6, { 'ct.w': { dims: [4, 6, 3, 3] } }),
    },
    {
      name: 'MatMul of activations (attention-like scores) with Softmax over the last axis, Transpose and Reshape',
      graph: () =>
        net(4, 3, 3, [
          { op: 'Reshape', inputs: ['s', 'shape'], outputs: ['tokens'] }, // [N, 4, 9]
          { op: 'Transpose', inputs: ['tokens'], outputs: ['t'], attributes: { perm: [0, 2, 1] } }, // [N, 9, 4]
          { op: 'MatMul', inputs: ['t', 'proj'], outputs: ['q'] }, // [N, 9, 4]
          { op: 'MatMul', inputs: ['q', 'tokens'], outputs: ['scores'] }, // [N, 9, 9]
          { op: 'Softmax', inputs: ['scores'], outputs: ['attn'], attributes: { axis: -1 } },
          { op: 'MatMul', inputs: ['attn', 't'], outputs: ['mixed'] }, // [N, 9, 4]
          { op: 'Transpose', inputs: ['mixed'], outputs: ['back'], attributes: { perm: [0, 2, 1] } },
          { op: 'Reshape', inputs: ['back', 'shape4'], outputs: ['img'] },
        ], 'img', 4, { shape: { dims: [3], values: [0, 4, 9], int64: true }, shape4: { dims: [4], values: [0, 4, 3, 3], int64: true }, proj: { dims: [4, 4] } }),
    },
    {
      name: 'LayerNormalization (opset 17) and its decomposed form (ReduceMean, Sub, Pow, Add, Sqrt, Div)',
      graph: () =>
        net(4, 3, 3, [
          { op: 'LayerNormalization', inputs: ['s', 'ln.scale', 'ln.bias'], outputs: ['ln'], attributes: { axis: 1 } },
          { op: 'ReduceMean', inputs: ['ln'], outputs: ['mu'], attributes: { axes: [2, 3] } },
          { op: 'Sub', inputs: ['ln', 'mu'], outputs: ['centred'] },
          { op: 'Pow', inputs: ['centred', 'two'], outputs: ['sq'] },
          { op: 'ReduceMean', inputs: ['sq'], outputs: ['var'], attributes: { axes: [2, 3] } },
          { op: 'Add', inputs: ['var', 'eps'], outputs: ['vareps'] },
          { op: 'Sqrt', inputs: ['vareps'], outputs: ['sd'] },
          { op: 'Div', inputs: ['centred', 'sd'], outputs: ['norm'] },
          { op: 'Tanh', inputs: ['norm'], outputs: ['a'] },
        ], 'a', 4, { 'ln.scale': { dims: [4, 3, 3] }, 'ln.bias': { dims: [4, 3, 3] }, two: { dims: [], values: [2] }, eps: { dims: [], values: [1e-3] } }, 17),
    },
    {
      name: 'BatchNormalization (inference), Concat, Split, Slice, Pad, Gather, Squeeze/Unsqueeze, ReduceSum',
      graph: () =>
        net(4, 4, 4, [
          { op: 'BatchNormalization', inputs: ['s', 'bn.g', 'bn.b', 'bn.m', 'bn.v'], outputs: ['bn'] },
          { op: 'Sigmoid', inputs: ['bn'], outputs: ['sg'] },
          { op: 'Split', inputs: ['sg'], outputs: ['p1', 'p2'], attributes: { axis: 1 } },
          { op: 'Concat', inputs: ['p2', 'sg', 'p1'], outputs: ['cat'], attributes: { axis: 1 } }, // 8 channels
          { op: 'Slice', inputs: ['cat', 'starts', 'ends', 'axes'], outputs: ['sl'] }, // [N, 8, 3, 4]
          { op: 'Pad', inputs: ['sl', 'pads'], outputs: ['pd'] }, // [N, 8, 4, 6]
          { op: 'Gather', inputs: ['pd', 'idx'], outputs: ['g'], attributes: { axis: 2 } }, // [N, 8, 3, 6]
          { op: 'ReduceSum', inputs: ['g', 'rs'], outputs: ['r'], attributes: { keepdims: 0 } }, // [N, 8, 3]
          { op: 'Unsqueeze', inputs: ['r', 'us'], outputs: ['u'] }, // [N, 8, 3, 1]
          { op: 'Tanh', inputs: ['u'], outputs: ['a'] },
        ], 'a', 8, {
          'bn.g': { dims: [4] }, 'bn.b': { dims: [4] }, 'bn.m': { dims: [4], scale: 0.1 }, 'bn.v': { dims: [4], values: [0.5, 1, 1.5, 2] },
          starts: { dims: [1], values: [1], int64: true }, ends: { dims: [1], values: [4], int64: true }, axes: { dims: [1], values: [2], int64: true },
          pads: { dims: [8], values: [0, 0, 1, 0, 0, 0, 0, 2], int64: true }, idx: { dims: [3], values: [3, 0, 2], int64: true },
          rs: { dims: [1], values: [3], int64: true }, us: { dims: [1], values: [3], int64: true },
        }),
    },
    {
      name: 'Slice with run-time ends (attention-style chunking: Shape → Gather → Div), Gather and Concat along axis 0',
      graph: () =>
        net(4, 3, 3, [
          { op: 'Shape', inputs: ['s'], outputs: ['shape'] },
          { op: 'Gather', inputs: ['shape', 'one'], outputs: ['channels'], attributes: { axis: 0 } },
          { op: 'Div', inputs: ['channels', 'two'], outputs: ['half'] },
          { op: 'Unsqueeze', inputs: ['half', 'zero'], outputs: ['end'] },
          { op: 'Slice', inputs: ['s', 'start', 'end', 'axis1'], outputs: ['front'] }, // channels [0, 2)
          { op: 'Sigmoid', inputs: ['s'], outputs: ['sg'] },
          { op: 'Transpose', inputs: ['sg'], outputs: ['t'], attributes: { perm: [1, 0, 2, 3] } }, // [4, N, 3, 3]
          { op: 'Gather', inputs: ['t', 'pick'], outputs: ['picked'], attributes: { axis: 0 } }, // [2, N, 3, 3]
          { op: 'Concat', inputs: ['picked', 't'], outputs: ['cat0'], attributes: { axis: 0 } }, // [6, N, 3, 3]
          { op: 'Transpose', inputs: ['cat0'], outputs: ['back'], attributes: { perm: [1, 0, 2, 3] } },
          { op: 'Concat', inputs: ['front', 'back'], outputs: ['a'], attributes: { axis: 1 } }, // 8 channels
        ], 'a', 8, {
          one: { dims: [], values: [1], int64: true }, two: { dims: [], values: [2], int64: true }, zero: { dims: [1], values: [0], int64: true },
          start: { dims: [1], values: [0], int64: true }, axis1: { dims: [1], values: [1], int64: true }, pick: { dims: [2], values: [3, 1], int64: true },
        }),
    },
    {
      name: 'opset 11 forms: Softmax over all axes from 1 (flattened), ReduceSum and Unsqueeze with axes attributes, Clip with min/max inputs',
      graph: () =>
        net(3, 2, 2, [
          { op: 'Softmax', inputs: ['s'], outputs: ['soft'], attributes: { axis: 1 } }, // over C·H·W at opset 11
          { op: 'Mul', inputs: ['soft', 's'], outputs: ['m'] },
          { op: 'ReduceSum', inputs: ['m'], outputs: ['r'], attributes: { axes: [3], keepdims: 0 } },
          { op: 'Unsqueeze', inputs: ['r'], outputs: ['u'], attributes: { axes: [3] } },
          { op: 'Clip', inputs: ['u', 'lo', 'hi'], outputs: ['a'] },
        ], 'a', 3, { lo: { dims: [], values: [-10] }, hi: { dims: [], values: [10] } }, 11),
    },
    {
      name: 'MaxPool with overlapping windows, pads and ceil mode (3×3, stride 2) and AveragePool excluding pads',
      graph: () =>
        net(4, 9, 9, [
          { op: 'MaxPool', inputs: ['s'], outputs: ['mp'], attributes: { kernel_shape: [3, 3], strides: [2, 2], pads: [1, 1, 0, 0], ceil_mode: 1 } },
          { op: 'AveragePool', inputs: ['mp'], outputs: ['ap'], attributes: { kernel_shape: [3, 3], strides: [1, 1], pads: [1, 1, 1, 1], count_include_pad: 0 } },
          { op: 'Tanh', inputs: ['ap'], outputs: ['a'] },
        ], 'a', 4),
      // maxima are unique in continuous seeded data; a step of 1e-3 moves no window's argmax
      step: 1e-3,
      bound: 5e-3,
    },
    {
      name: 'Relu, LeakyRelu, Clip, HardSigmoid, HardSwish (opset 14) away from their kinks',
      graph: () =>
        net(4, 3, 3, [
          { op: 'Conv', inputs: ['s', 'c.w', 'c.b'], outputs: ['c'], attributes: { kernel_shape: [1, 1] } },
          { op: 'Relu', inputs: ['c'], outputs: ['r'] },
          { op: 'LeakyRelu', inputs: ['c'], outputs: ['lr'], attributes: { alpha: 0.1 } },
          { op: 'Clip', inputs: ['c', 'lo', 'hi'], outputs: ['cl'] },
          { op: 'HardSigmoid', inputs: ['c'], outputs: ['hs'], attributes: { alpha: 0.3, beta: 0.5 } },
          { op: 'HardSwish', inputs: ['c'], outputs: ['hw'] },
          { op: 'Sum', inputs: ['r', 'lr', 'cl', 'hs', 'hw'], outputs: ['a'] },
        ], 'a', 6, { 'c.w': { dims: [6, 4, 1, 1], scale: 2 }, 'c.b': { dims: [6] }, lo: { dims: [], values: [-0.5] }, hi: { dims: [], values: [0.8] } }, 14),
      // five kinks per unit: the plain secant at a step of 1e-4 crosses none of them here (Richardson at 1e-3
      // did, 1.7e-2); what is left is float32 rounding ~ ε·|y|/h (each operator alone: ≤ 1.0e-3)
      step: 1e-4,
      method: 'secant',
      bound: 3e-3,
    },
  ];
  for (const c of cases) {
    it(`buildGradientGraph: ${c.name}`, async () => {
      const d = await disagreement(c.graph(), { ...(c.step ? { step: c.step } : {}), ...(c.method ? { method: c.method } : {}) });
      expect(d.gain).toBeLessThanOrEqual(c.bound ?? SMOOTH);
      expect(d.offset).toBeLessThanOrEqual(c.bound ?? SMOOTH);
    });
  }
});

describe('buildGradientGraph refusals', () => {
  it('buildGradientGraph names an operator without a rule, its node and the site, and points to --method richardson', async () => {
    expect(GRADIENT_RULES['Sin']).toBeUndefined();
    const path = writeOpGraph(net(2, 2, 2, [{ op: 'Sin', inputs: ['s'], outputs: ['a'] }], 'a', 2));
    const { npy } = writeStimuliNpy(dirname(path), [2, 2, 2, 2]);
    const error = await senseSites({ model: path, stimuli: npy, site: 's', threads: 1 }).catch((e: unknown) => e as Error & { code: string; hint: string });
    expect(error.code).toBe('E_GRADIENT_OP');
    expect(error.message).toMatch(/^--method exact: no gradient rule for Sin at node "Sin_2" between site "s" and readout "y" of graph\.onnx$/);
    expect(error.hint).toMatch(/--method richardson/);
    // the finite-difference path still measures it
    expect((await senseSites({ model: path, stimuli: npy, site: 's', threads: 1, method: 'richardson' })).sites[0]!.method).toBe('richardson');
  });

  it('buildGradientGraph differentiates only the nodes between site and readout: a side branch without a rule (Sin) and a shape computation (Shape → Reshape target) are left alone', async () => {
    const graph = net(2, 2, 2, [
      { op: 'Sin', inputs: ['s'], outputs: ['side'] }, // read by nothing on the way to the readout
      { op: 'Tanh', inputs: ['s'], outputs: ['t'] },
      { op: 'Shape', inputs: ['t'], outputs: ['shape'] },
      { op: 'Reshape', inputs: ['t', 'shape'], outputs: ['a'] },
    ], 'a', 2);
    const d = await disagreement(graph);
    expect(d.gain).toBeLessThanOrEqual(SMOOTH);
    expect(d.offset).toBeLessThanOrEqual(SMOOTH);
  });
});
