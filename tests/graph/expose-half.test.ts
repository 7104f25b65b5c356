import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { exposeTensorsAsFloat16, halfOutputName, meansOutputName } from '../../src/graph/expose-half.js';
import { featureMeans, layoutGeometry } from '../../src/graph/layout.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { decodeModel } from '../../src/graph/onnx.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { float32ToFloat16 } from '../../src/snapshot/float16.js';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, tempFolder } from '../helpers/onnx-builder.js';

describe('exposeTensorsAsFloat16', () => {
  it('exposeTensorsAsFloat16(model, names, geometries) adds a Cast to FLOAT16 and Reshape + ReduceMean per tensor, and leaves the loaded model as it was', () => {
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    writeFileSync(path, buildTinyNet({ bias: true }));
    const model = loadModel(path);
    const before = { nodes: model.proto.graph!.node!.length, outputs: model.proto.graph!.output!.length, inits: model.proto.graph!.initializer!.length };
    const bytes = exposeTensorsAsFloat16(model, ['relu0', 'conv1'], [layoutGeometry([4, 16, 16]), layoutGeometry([6, 8, 8])]);
    expect({ nodes: model.proto.graph!.node!.length, outputs: model.proto.graph!.output!.length, inits: model.proto.graph!.initializer!.length }).toEqual(before);
    const graph = decodeModel(bytes).graph!;
    const cast = graph.node!.find((n) => n.output?.[0] === halfOutputName('relu0'))!;
    expect(cast.opType).toBe('Cast');
    expect(Number(cast.attribute![0]!.i)).toBe(10); // onnx.proto TensorProto.FLOAT16
    expect(graph.node!.find((n) => n.output?.[0] === meansOutputName('conv1'))!.opType).toBe('ReduceMean');
    expect(graph.output!.map((o) => o.name)).toEqual([...model.proto.graph!.output!.map((o) => o.name), halfOutputName('relu0'), meansOutputName('relu0'), halfOutputName('conv1'), meansOutputName('conv1')]);
  });

  it('exposeTensorsAsFloat16 outputs, run by the runtime, are the IEEE 754 float16 bits of the float32 tensor and its float64 feature means up to float32 summation', async () => {
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    writeFileSync(path, buildTinyNet({ bias: true }));
    const model = loadModel(path);
    const g = layoutGeometry([4, 16, 16]);
    // inputs large enough that some values pass the float16 range and become ±Infinity in both
    const session = await createNetworkSession(exposeTensorsAsFloat16(model, ['conv0'], [g]), { threads: 1, inWorker: false });
    try {
      const rng = createRandom(4);
      const input = new Float32Array(2 * 3 * 16 * 16).map(() => (rng.uniform() - 0.5) * 3e4);
      const out = await session.runStored({ input: { data: input, dims: [2, 3, 16, 16] } }, [halfOutputName('conv0'), meansOutputName('conv0')]);
      const plain = await createNetworkSession(exposeTensors(model, ['conv0']), { threads: 1, inWorker: false });
      const values = (await plain.run({ input: { data: input, dims: [2, 3, 16, 16] } }, ['conv0']))['conv0']!.data;
      await plain.close();
      expect(Array.from(out[halfOutputName('conv0')]!.data as Uint16Array)).toEqual(Array.from(float32ToFloat16(values)));
      const means = out[meansOutputName('conv0')]!.data as Float32Array;
      const exact = featureMeans(values, 2, g);
      const magnitude = featureMeans(values.map(Math.abs), 2, g);
      for (let i = 0; i < exact.length; i++) expect(Math.abs(means[i]! - exact[i]!)).toBeLessThanOrEqual(magnitude[i]! * 256 * 2 ** -24 + Math.abs(exact[i]!) * 2 ** -23);
    } finally {
      await session.close();
    }
  });
});
