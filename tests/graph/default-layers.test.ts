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
});
