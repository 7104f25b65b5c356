import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { createNetworkSession, probeOutputs } from '../../src/session/network-session.js';

const RESIDUAL = join(import.meta.dirname, '..', 'reference', 'fixtures', 'residual.onnx');

describe('probeOutputs', () => {
  it('probeOutputs(bytes, feeds) gives every output with the dims of a session run that fetches them all (exact property)', async () => {
    const model = loadModel(RESIDUAL);
    // every Conv and Clip output of the reference network
    const names = (model.proto.graph!.node ?? []).filter((n) => n.opType === 'Conv' || n.opType === 'Clip').map((n) => n.output![0]!);
    expect(names.length).toBeGreaterThan(64);
    const bytes = exposeTensors(model, names);
    const feeds = { input: { data: new Float32Array(2 * 3 * 64 * 64).fill(0.5), dims: [2, 3, 64, 64] } };
    const probed = await probeOutputs(bytes, feeds, 'residual.onnx');
    const session = await createNetworkSession(bytes, { threads: 1, inWorker: false });
    try {
      const all = await session.run(feeds);
      expect([...probed.keys()].sort()).toEqual(Object.keys(all).sort());
      for (const [name, tensor] of Object.entries(all)) expect(probed.get(name), name).toEqual({ type: 'float32', dims: tensor.dims });
    } finally {
      await session.close();
    }
  });
});
