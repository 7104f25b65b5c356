import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { analyseGraph, weightLayerDepths } from '../../src/graph/structure.js';
import { buildTinyNet, tempFolder } from '../helpers/onnx-builder.js';

const { onnx } = onnxProto;

describe('weightLayerDepths', () => {
  it('weightLayerDepths counts Conv and MatMul nodes with a weight on the longest path (hand-counted on the tiny net with a residual Add)', () => {
    const dir = tempFolder();
    const path = join(dir, 'res.onnx');
    writeFileSync(path, buildTinyNet({ widths: [4, 4, 6], residual: true }));
    const depths = weightLayerDepths(analyseGraph(loadModel(path)));
    // conv0 → relu0 → pool0 → conv1 → res = conv1 + pool0 → relu1 → pool1 → conv2 → relu2 → gap → flat → logits (MatMul with Wfc)
    const expected: Record<string, number> = { input: 0, conv0: 1, relu0: 1, pool0: 1, conv1: 2, res: 2, relu1: 2, pool1: 2, conv2: 3, relu2: 3, gap: 3, flat: 3, logits: 4 };
    for (const [name, depth] of Object.entries(expected)) expect(depths.get(name), name).toBe(depth);
  });

  it('weightLayerDepths does not count a MatMul of two activations (attention scores) and ignores weight-only branches', () => {
    const dir = tempFolder();
    const path = join(dir, 'attn.onnx');
    const w = new Float32Array(16).fill(0.1);
    const weight = { name: 'Wq', dims: [4, 4], dataType: 1, rawData: new Uint8Array(w.buffer) };
    const model = {
      irVersion: 8,
      opsetImport: [{ domain: '', version: 13 }],
      graph: {
        name: 'attn',
        node: [
          { name: 'q', opType: 'MatMul', input: ['x', 'Wq'], output: ['q'] },
          { name: 'wt', opType: 'Transpose', input: ['Wq'], output: ['WqT'] },
          { name: 'k', opType: 'MatMul', input: ['x', 'WqT'], output: ['k'] },
          { name: 'kt', opType: 'Transpose', input: ['k'], output: ['kT'], attribute: [{ name: 'perm', type: 7, ints: [0, 2, 1] }] },
          { name: 's', opType: 'MatMul', input: ['q', 'kT'], output: ['scores'] },
          { name: 'sm', opType: 'Softmax', input: ['scores'], output: ['probs'] },
          { name: 'o', opType: 'MatMul', input: ['probs', 'x'], output: ['out'] },
        ],
        initializer: [weight],
        input: [{ name: 'x', type: { tensorType: { elemType: 1, shape: { dim: [{ dimParam: 'n' }, { dimValue: 3 }, { dimValue: 4 }] } } } }],
        output: [{ name: 'out', type: { tensorType: { elemType: 1, shape: { dim: [{ dimParam: 'n' }, { dimValue: 3 }, { dimValue: 4 }] } } } }],
      },
    };
    writeFileSync(path, onnx.ModelProto.encode(model).finish());
    const depths = weightLayerDepths(analyseGraph(loadModel(path)));
    expect(depths.get('WqT')).toBe(0); // computed from a weight only
    expect(depths.get('q')).toBe(1);
    expect(depths.get('k')).toBe(1); // the weight reaches it through a Transpose: still a weight layer
    expect(depths.get('scores')).toBe(1); // activation × activation: not a weight layer
    expect(depths.get('probs')).toBe(1);
    expect(depths.get('out')).toBe(1);
  });

  it('weightLayerDepths of torchvision ResNet-50 and ViT-B/16 at the logits is 50, the layer count their names give', () => {
    // graph-only exports (tests/graph/fixtures/make_graph_fixtures.py, Debian python3-torch): ResNet-50's longest
    // path holds 1 + 16 × 3 convolutions and the classifier (its 4 downsampling convolutions are side paths);
    // ViT-B/16's the patch convolution, 12 × (QKV projection, output projection, 2 MLP layers) and the head —
    // the attention products of two activations do not count
    const folder = join(import.meta.dirname, 'fixtures');
    for (const name of ['resnet50-graph.onnx', 'vit-b16-graph.onnx']) {
      const depths = weightLayerDepths(analyseGraph(loadModel(join(folder, name))));
      expect(depths.get('logits'), name).toBe(50);
    }
  });
});
