/**
 * inferLayouts / declaredLayout on graphs exported by PyTorch (tests/reference/make_layout_fixtures.py,
 * make_gradient_fixtures.py): the layouts are the axes PyTorch's modules compute on — nn.Linear and
 * nn.LayerNorm act on the last axis (torch.nn docs), nn.Conv2d on NCHW — and a sidecar declaration
 * overrides them, refused with the tensor, the value and the shape when it does not fit.
 */
import { copyFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { declaredLayout } from '../../src/graph/infer-layout.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';

const REFERENCE = new URL('../reference/fixtures/', import.meta.url).pathname;
const NHWC = join(REFERENCE, 'layouts', 'channels-last.onnx');
const VIT = join(REFERENCE, 'attention', 'vit-opset17.onnx');

function withSidecar(model: string, sidecar: unknown): string {
  const dir = tempFolder();
  const path = join(dir, 'net.onnx');
  copyFileSync(model, path);
  writeFileSync(join(dir, 'net.json'), JSON.stringify(sidecar));
  return path;
}

describe('inferLayouts', () => {
  it('inferLayouts: LayerNormalization (opset 17) and Linear read tokens features last; the patch Conv stays channels-first, its [D, T] reshape features first', async () => {
    const { layers } = await inspectModel(VIT);
    const byName = new Map(layers.map((l) => [l.name, l]));
    for (const l of layers.filter((x) => x.op === 'LayerNormalization')) expect(l.layout).toMatchObject({ kind: 'tokens', featureAxis: 1, grid: { prefix: 1, height: 4, width: 4 } });
    expect(byName.get('/conv_proj/Conv_output_0')!.layout).toEqual({ kind: 'channels-first', featureAxis: 0, source: 'graph' });
    // [N, 16, 4·4] after flatten: Transpose [0, 2, 1] to tokens carries the feature axis back to axis 0
    expect(byName.get('/Reshape_output_0')!.layout).toEqual({ kind: 'channels-first', featureAxis: 0, source: 'graph' });
    expect(byName.get('/Transpose_output_0')!.layout).toMatchObject({ kind: 'tokens', featureAxis: 1, grid: { prefix: 0, height: 4, width: 4 } });
    // the pooled class token and the logits are vectors
    expect(byName.get('logits')!.layout.kind).toBe('vector');
  });

  it('inferLayouts: a sidecar declaration overrides the graph and is marked as such', async () => {
    const model = withSidecar(NHWC, { layouts: { '/relu/Relu_output_0': { kind: 'channels-first' }, '/mix/Add_output_0': { kind: 'channels-last', featureAxis: 2 } } });
    const { layers } = await inspectModel(model);
    const relu = layers.find((l) => l.name === '/relu/Relu_output_0')!;
    expect(relu.layout).toEqual({ kind: 'channels-first', featureAxis: 0, source: 'sidecar' });
    expect(layers.find((l) => l.name === '/mix/Add_output_0')!.layout.source).toBe('sidecar');
    const listed = await runSonde(['layers', model]);
    expect(listed.stdout).toMatch(/\/relu\/Relu_output_0 .* maps 6×6×5 \(features first\), sidecar/);
  });

  it('inferLayouts: a declaration for a tensor the model lacks, a misspelt key, or one that does not fit the shape is refused with one line', async () => {
    const cases: Array<[unknown, RegExp]> = [
      [{ layouts: { '/relu/Relu_out': { kind: 'channels-last' } } }, /layouts names "\/relu\/Relu_out", which is not a recordable tensor of net\.onnx/],
      [{ layouts: { '/relu/Relu_output_0': { kind: 'channels-last', featureaxis: 2 } } }, /layouts\..*featureaxis|Unrecognized key/i],
      [{ layouts: { '/relu/Relu_output_0': { kind: 'tokens' } } }, /is declared tokens but has 3 axes \(per-stimulus shape \[6, 6, 5\]\)/],
      [{ layouts: { '/relu/Relu_output_0': { kind: 'channels-last', featureAxis: 3 } } }, /has featureAxis 3, outside 0…2/],
      [{ layouts: { '/relu/Relu_output_0': { kind: 'cubes' } } }, /layouts.*kind/],
    ];
    for (const [sidecar, message] of cases) {
      const result = await runSonde(['layers', withSidecar(NHWC, sidecar)]);
      expect(result.code, result.stderr).toBe(2);
      expect(result.stderr.trim().split('\n')).toHaveLength(1);
      expect(result.stderr).toMatch(message);
    }
  });
});

describe('declaredLayout', () => {
  it('declaredLayout: tokens take the square grid or a declared one that adds up, and heads that divide the features', () => {
    expect(declaredLayout('t', [197, 768], { kind: 'tokens' }, 'sidecar')).toEqual({ kind: 'tokens', featureAxis: 1, source: 'sidecar', grid: { prefix: 1, height: 14, width: 14 } });
    expect(declaredLayout('t', [50, 64], { kind: 'tokens', grid: { prefix: 2, height: 6, width: 8 }, heads: 4 }, 'sidecar')).toEqual({ kind: 'tokens', featureAxis: 1, source: 'sidecar', grid: { prefix: 2, height: 6, width: 8 }, heads: 4 });
    expect(() => declaredLayout('t', [50, 64], { kind: 'tokens', grid: { prefix: 1, height: 6, width: 8 } }, 'sidecar')).toThrow(/grid 1\+6×8 = 49 tokens, not 50/);
    expect(() => declaredLayout('t', [50, 64], { kind: 'tokens', heads: 5 }, 'sidecar')).toThrow(/5 heads, which do not divide 64 features/);
    expect(() => declaredLayout('t', [3], { kind: 'scalar' }, 'sidecar')).toThrow(/declared scalar but has 1 axes/);
  });
});
