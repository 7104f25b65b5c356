import { rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { buildTinyNet, externalise, tempFolder } from '../helpers/onnx-builder.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { encodeModel } from '../../src/graph/onnx.js';
import { analyseGraph } from '../../src/graph/structure.js';
import { weightlessModel } from '../../src/graph/weightless.js';
import { probeOutputs } from '../../src/session/network-session.js';

const REFERENCE = join(import.meta.dirname, '..', 'reference', 'fixtures');
// the committed reference networks: convolutional (residual, branching, gated), bias-free, torchvision's
// ViT at two opsets (token tensors, attention reshapes computed from Shape), channels-last and
// batch-first attention
const MODELS: Array<[string, number[]]> = [
  ['residual.onnx', [2, 3, 64, 64]],
  ['branching.onnx', [2, 3, 64, 64]],
  ['gated.onnx', [2, 3, 64, 64]],
  ['homogeneous.onnx', [2, 3, 64, 64]],
  ['attention/vit-opset14.onnx', [2, 3, 32, 32]],
  ['attention/vit-opset17.onnx', [2, 3, 32, 32]],
  ['layouts/channels-last.onnx', [2, 3, 16, 16]],
  ['layouts/attention-batch-first.onnx', [2, 3, 16, 16]],
];

describe('weightlessModel', () => {
  it.each(MODELS)('%s: every node output has the element type and dims of the model with its weights (exact property)', async (file, shape) => {
    const model = loadModel(join(REFERENCE, file));
    const names = analyseGraph(model).nodes.flatMap((n) => n.outputs);
    const dims = model.input.dims.map((d, i) => (typeof d === 'number' ? d : shape[i]!));
    const feeds = { [model.input.name]: { data: new Float32Array(dims.reduce((a, b) => a * b, 1)).fill(0.5), dims } };
    const before = encodeModel(model.proto).length;
    // 16 elements and up: the tiny fixtures' weights are replaced too
    const light = weightlessModel(model, 16);
    expect(light).not.toBe(model);
    // the original is left as it was
    expect(encodeModel(model.proto).length).toBe(before);
    expect(exposeTensors(light, names).length).toBeLessThan(exposeTensors(model, names).length);
    const withWeights = await probeOutputs(exposeTensors(model, names), feeds, file);
    const without = await probeOutputs(exposeTensors(light, names), feeds, file);
    for (const name of names) expect(without.get(name), name).toEqual(withWeights.get(name));
  });

  it('keeps integer and small float initializers, and drops replaced ones from the graph inputs', () => {
    const model = loadModel(join(REFERENCE, 'residual.onnx'));
    const graph = model.proto.graph!;
    const large = (graph.initializer ?? []).filter((t) => t.dataType === 1 && (t.dims ?? []).reduce<number>((a, d) => a * Number(d), 1) >= 1024);
    expect(large.length).toBeGreaterThan(0);
    // list an initializer among the graph inputs, as models of IR version < 4 do
    const listed = { ...model, proto: { ...model.proto, graph: { ...graph, input: [...(graph.input ?? []), { name: large[0]!.name }] } } } as typeof model;
    const light = weightlessModel(listed);
    const lightGraph = light.proto.graph!;
    expect((lightGraph.input ?? []).map((i) => i.name)).toEqual((graph.input ?? []).map((i) => i.name));
    const fills = (lightGraph.node ?? []).filter((n) => n.opType === 'ConstantOfShape');
    expect(fills.map((n) => n.output![0]).sort()).toEqual(large.map((t) => t.name).sort());
    const keptNames = new Set((lightGraph.initializer ?? []).map((t) => t.name));
    for (const t of graph.initializer ?? []) expect(keptNames.has(t.name!), t.name!).toBe(!large.includes(t));
  });

  it.each([false, true])('a model with its weights in an external file: the inspection of the weightless copy (probeAll %s: every tensor run, not inferred) equals the probe with the weights (exact property)', async (probeAll) => {
    const folder = tempFolder();
    try {
      const path = join(folder, 'external.onnx');
      writeFileSync(path, externalise(buildTinyNet({ widths: [8, 16, 16], residual: true, bias: true, externalData: false }), folder));
      const model = loadModel(path);
      const inspection = await inspectModel(model, { probeAll });
      // the same tensors probed with the weights inlined by loadModel, every output exposed at once
      const names = analyseGraph(model).nodes.flatMap((n) => n.outputs);
      const dims = [inspection.probeBatch, ...inspection.input.shape.slice(1)];
      const feeds = { [model.input.name]: { data: new Float32Array(dims.reduce((a, b) => a * b, 1)), dims } };
      const withWeights = await probeOutputs(exposeTensors(model, names), feeds, 'external.onnx');
      expect(inspection.layers.length).toBeGreaterThan(3);
      for (const layer of inspection.layers) expect([inspection.probeBatch, ...layer.shape], layer.name).toEqual(withWeights.get(layer.name)!.dims);
      for (const name of names) expect(inspection.probed.get(name), name).toEqual(withWeights.get(name));
    } finally {
      rmSync(folder, { recursive: true, force: true });
    }
  });
});
