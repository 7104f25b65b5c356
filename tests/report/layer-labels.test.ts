/**
 * Short layer labels: checked on the tensor names PyTorch's ONNX exporter gave a MobileNetV2-like
 * network (tests/reference/fixtures/residual/mapping.json, written by make_fixtures.py from torchvision
 * module names) and on exact properties: labels are distinct for distinct names, and each label is a
 * suffix of its cleaned name.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { ellipsize, labelSegments, shortLayerLabels } from '../../src/report/layer-labels.js';

const mapping = JSON.parse(readFileSync(new URL('../reference/fixtures/residual/mapping.json', import.meta.url), 'utf8')) as { tensors: Array<{ module: string; onnx: string }> };

describe('shortLayerLabels', () => {
  it('shortLayerLabels: the PyTorch export names get distinct labels that keep the module path PyTorch names the tensor by', () => {
    const names = mapping.tensors.map((t) => t.onnx);
    const labels = shortLayerLabels(names);
    expect(new Set(labels.values()).size).toBe(new Set(names).size);
    for (const t of mapping.tensors) {
      const label = labels.get(t.onnx)!;
      // e.g. module features.1.conv.0.2, tensor /features/features.1/conv/conv.0/conv.0.2/Clip_output_0 → "features.1/conv.0.2/Clip"
      expect(label.length).toBeLessThanOrEqual(t.onnx.length);
      expect(label).not.toMatch(/_output_\d+$/);
      // every segment but the operator names a part of the PyTorch module path (features.1/conv.0.2/Clip ↔ features.1.conv.0.2)
      const segments = label.split('/');
      if (segments.length > 1) for (const segment of segments.slice(0, -1)) expect(t.module).toContain(segment);
    }
    expect(labels.get('/features/features.1/conv/conv.0/conv.0.2/Clip_output_0')).toBe('features.1/conv.0.2/Clip');
  });

  it('shortLayerLabels: the demo network /convK/relu/Relu_output_0 names become convK/Relu, logits stays', () => {
    const names = ['/conv1/relu/Relu_output_0', '/conv2/relu/Relu_output_0', '/conv2/pool/MaxPool_output_0', 'logits'];
    const labels = shortLayerLabels(names);
    expect([...labels.values()]).toEqual(['conv1/Relu', 'conv2/Relu', 'MaxPool', 'logits']);
  });

  it('shortLayerLabels: every label is a suffix of its cleaned segments and labels of distinct names differ (exact property, random names)', () => {
    const parts = ['a', 'b', 'relu', 'Relu', 'conv', 'conv.0', 'x_output_0', ''];
    let seed = 7;
    const pick = () => parts[(seed = (seed * 1103515245 + 12345) % 2 ** 31) % parts.length]!;
    for (let trial = 0; trial < 200; trial++) {
      const names = Array.from({ length: 6 }, () => `/${pick()}/${pick()}/${pick()}`);
      const labels = shortLayerLabels(names);
      const distinct = [...new Set(names)];
      expect(new Set(distinct.map((n) => labels.get(n))).size).toBe(distinct.length);
      for (const n of distinct) {
        const label = labels.get(n)!;
        expect(label === n || labelSegments(n).join('/').endsWith(label)).toBe(true);
      }
    }
  });

  it('shortLayerLabels: two names whose cleaned forms coincide keep their full names', () => {
    const labels = shortLayerLabels(['/a/relu/Relu_output_0', '/a/Relu_output_0']);
    expect(labels.get('/a/relu/Relu_output_0')).toBe('/a/relu/Relu_output_0');
    expect(labels.get('/a/Relu_output_0')).toBe('/a/Relu_output_0');
  });
});

describe('ellipsize', () => {
  it('ellipsize: shortens to the width with one ellipsis, keeping both ends; short text unchanged', () => {
    expect(ellipsize('short', 10)).toBe('short');
    const cut = ellipsize('/features/features.16/conv/conv.1/conv.1.2/Clip_output_0', 20);
    expect([...cut].length).toBe(20);
    expect(cut.startsWith('/feat')).toBe(true);
    expect(cut.endsWith('output_0')).toBe(true);
    expect(cut.split('…')).toHaveLength(2);
  });
});
