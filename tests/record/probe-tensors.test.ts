import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { analyseGraph } from '../../src/graph/structure.js';
import { probeTensors } from '../../src/record/probe-tensors.js';
import { probeOutputs } from '../../src/session/network-session.js';

const RESIDUAL = join(import.meta.dirname, '..', 'reference', 'fixtures', 'residual.onnx');

describe('probeTensors', () => {
  const model = loadModel(RESIDUAL);
  const names = analyseGraph(model).nodes.flatMap((n) => n.outputs);
  const feeds = { input: { data: new Float32Array(2 * 3 * 64 * 64).fill(0.25), dims: [2, 3, 64, 64] } };

  it('probed in slices of a session each gives the dims and types of one probe of every tensor (exact property)', async () => {
    const whole = await probeOutputs(exposeTensors(model, names), feeds, 'residual.onnx');
    const slices: number[] = [];
    // 1 MiB a session: the residual network's tensors at 64 px take several sessions
    const sliced = await probeTensors(model, names, feeds, 'residual.onnx', { sessionBytes: 2 ** 20, onSlice: (done) => slices.push(done) });
    expect(slices.length).toBeGreaterThan(3);
    expect(slices.at(-1)).toBe(names.length);
    expect([...sliced.keys()].sort()).toEqual([...whole.keys()].sort());
    for (const [name, shape] of whole) expect(sliced.get(name), name).toEqual(shape);
  });

  it('keeps each slice within its budget when sizes are known, one tensor at least', async () => {
    const whole = await probeOutputs(exposeTensors(model, names), feeds, 'residual.onnx');
    const bytes = (name: string) => whole.get(name)!.dims.reduce((a, b) => a * b, 1) * 4;
    const budget = 3 * 2 ** 20;
    const done: number[] = [0];
    await probeTensors(model, names, feeds, 'residual.onnx', { sessionBytes: budget, sizeOf: bytes, onSlice: (n) => done.push(n) });
    for (let k = 1; k < done.length; k++) {
      const slice = names.slice(done[k - 1], done[k]);
      const total = slice.reduce((sum, name) => sum + bytes(name), 0);
      if (slice.length > 1) expect(total, `slice ${k}`).toBeLessThanOrEqual(budget);
    }
  });
});
