/**
 * defaultTensors on graphs exported by PyTorch (tests/reference/make_layout_fixtures.py): the default
 * selection of token tensors is the output of the modules a transformer block is made of, as PyTorch's
 * exporter scopes them (make_fixtures.onnx_output_of: the one tensor leaving a module's scope).
 * The torchvision VisionTransformer's blocks are checked in tests/reference/layout-hooks.test.ts.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { inspectModel } from '../../src/record/inspect-model.js';
import { writeOpGraph } from '../helpers/op-graph.js';

const LAYOUTS = new URL('../reference/fixtures/layouts/', import.meta.url).pathname;
const INDEX = JSON.parse(readFileSync(join(LAYOUTS, 'index.json'), 'utf8')) as Record<string, Record<string, string>>;

describe('defaultTensors', () => {
  it('defaultTensors picks x·Φ(x) of a tanh GELU (nn.GELU(approximate="tanh") at opset 14), none of its parts, and the residual stream after the MLP', async () => {
    const { layers } = await inspectModel(join(LAYOUTS, 'mlp-gelu-tanh.onnx'));
    const defaults = layers.filter((l) => l.default).map((l) => l.name);
    const residual = layers.filter((l) => l.op === 'Add' && l.name.startsWith('/Add'))[0]!.name;
    expect(defaults.sort()).toEqual([INDEX['mlp-gelu-tanh']!.act!, residual, 'logits'].sort());
    // the Tanh inside the GELU is an activation operator, but not the activation
    expect(layers.find((l) => l.op === 'Tanh')!.default).toBe(false);
    // no bias-less MatMul output of a token tensor
    for (const l of layers.filter((x) => x.op === 'MatMul')) expect(l.default).toBe(false);
  });

  it('defaultTensors on maps: a MatMul followed by its bias Add gives way to the Add; ReLU and the Gemm readout stay', async () => {
    const { layers } = await inspectModel(join(LAYOUTS, 'channels-last.onnx'));
    const pick = (name: string) => layers.find((l) => l.name === name)!.default;
    expect(pick('/mix/MatMul_output_0')).toBe(false);
    expect(pick('/mix/Add_output_0')).toBe(true);
    expect(pick(INDEX['channels-last']!.relu!)).toBe(true);
    expect(pick('logits')).toBe(true);
    expect(pick('/conv/Conv_output_0')).toBe(false);
  });

  it('defaultTensors picks x·σ(x) of a SiLU written out as Sigmoid and Mul in a token MLP, not the Sigmoid (exact graph, common practice for SiLU exports)', async () => {
    const model = writeOpGraph({
      input: [4, 6], // [T, D] tokens per stimulus
      nodes: [
        { op: 'MatMul', inputs: ['x', 'w1'], outputs: ['up'] },
        { op: 'Add', inputs: ['up', 'b1'], outputs: ['h'] },
        { op: 'Sigmoid', inputs: ['h'], outputs: ['gate'] },
        { op: 'Mul', inputs: ['h', 'gate'], outputs: ['silu'] },
        { op: 'MatMul', inputs: ['silu', 'w2'], outputs: ['down'] },
        { op: 'Add', inputs: ['x', 'down'], outputs: ['block'] },
        { op: 'ReduceMean', inputs: ['block'], outputs: ['pooled'], attributes: { axes: [1], keepdims: 0 } },
      ],
      weights: { w1: { dims: [6, 8] }, b1: { dims: [8] }, w2: { dims: [8, 6] } },
      output: 'pooled',
      opset: 13,
    });
    const { layers } = await inspectModel(model);
    expect(layers.find((l) => l.name === 'silu')!.layout.kind).toBe('tokens');
    expect(layers.filter((l) => l.default).map((l) => l.name).sort()).toEqual(['block', 'pooled', 'silu']);
  });
});
