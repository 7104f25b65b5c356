import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { inspectModel } from '../../src/record/inspect-model.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { analyseGraph } from '../../src/graph/structure.js';
import { inferOutputShapes } from '../../src/session/network-session.js';
import { writeOpGraph } from '../helpers/op-graph.js';

const ROOT = join(import.meta.dirname, '..', '..');
const REFERENCE = join(ROOT, 'tests', 'reference', 'fixtures');
// every committed network the runtime can run: convolutional (residual, branching, gated, bias-free,
// channels-last), token models with attention reshapes computed from Shape (ViT at two opsets,
// batch-first attention, attention heads), an MLP, the demo network and the example network
const MODELS = [
  'residual.onnx',
  'branching.onnx',
  'gated.onnx',
  'homogeneous.onnx',
  'attention/vit-opset14.onnx',
  'attention/vit-opset17.onnx',
  'attention/tokens/heads-net.onnx',
  'layouts/channels-last.onnx',
  'layouts/attention-batch-first.onnx',
  'layouts/mlp-gelu-tanh.onnx',
].map((f) => join(REFERENCE, f));
MODELS.push(join(ROOT, 'models', 'demo', 'glyphnet.onnx'), join(ROOT, 'examples', 'own-network', 'net.onnx'));

describe('inspection from the runtime\'s shape inference', () => {
  it.each(MODELS.map((m) => [m.slice(ROOT.length + 1), m]))('%s: the same layers, shapes, layouts, defaults and skipped tensors as probing every tensor by a run (the runtime\'s own output shapes are the reference)', async (_, path) => {
    const model = loadModel(path);
    const shape = model.input.dims.map((d, i) => (typeof d === 'number' ? d : i === 0 ? 1 : 32));
    const options = model.input.dims.slice(1).some((d) => typeof d !== 'number') ? { inputShape: shape } : {};
    const inferred = await inspectModel(model, options);
    const probed = await inspectModel(model, { ...options, probeAll: true });
    expect(inferred.layers).toEqual(probed.layers);
    expect(inferred.skippedTensors).toEqual(probed.skippedTensors);
    expect([...inferred.probed].sort()).toEqual([...probed.probed].sort());
  });

  it('a Reshape to a shape computed by Shape, whose output the runtime\'s inference knows nothing of (reported with no dims, as a scalar would be): probed, not taken for a scalar', async () => {
    const path = writeOpGraph({
      input: [2, 2, 2],
      nodes: [
        { op: 'Tanh', inputs: ['x'], outputs: ['t'] },
        { op: 'Shape', inputs: ['t'], outputs: ['shape'] },
        { op: 'Reshape', inputs: ['t', 'shape'], outputs: ['a'] },
        { op: 'GlobalAveragePool', inputs: ['a'], outputs: ['pool'] },
        { op: 'Flatten', inputs: ['pool'], outputs: ['flat'] },
        { op: 'Gemm', inputs: ['flat', 'w', 'b'], outputs: ['y'], attributes: { transB: 1 } },
      ],
      weights: { w: { dims: [3, 2] }, b: { dims: [3] } },
      output: 'y',
      opset: 13,
    });
    const inferred = await inspectModel(path);
    const probed = await inspectModel(path, { probeAll: true });
    expect(inferred.layers.map((l) => [l.name, l.shape])).toEqual([['t', [2, 2, 2]], ['a', [2, 2, 2]], ['pool', [2, 1, 1]], ['flat', [2]], ['y', [3]]]);
    expect(inferred.layers).toEqual(probed.layers);
    expect(inferred.skippedTensors).toEqual(probed.skippedTensors);
  });

  it('residual.onnx: inference alone fixes every node output\'s dims (numbers, and the input\'s batch name), so inspecting it runs nothing', async () => {
    const model = loadModel(join(REFERENCE, 'residual.onnx'));
    const names = analyseGraph(model).nodes.flatMap((n) => n.outputs);
    const shapes = await inferOutputShapes(exposeTensors(model, names), 'residual.onnx');
    const batch = model.input.dims[0];
    expect(typeof batch).toBe('string');
    for (const name of names) {
      const found = shapes.get(name);
      expect(found, name).toBeDefined();
      for (const d of found!.dims) expect(typeof d === 'number' || d === batch, `${name}: ${found!.dims.join(',')}`).toBe(true);
    }
  });
});
