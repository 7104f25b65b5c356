/**
 * runRowBytes and rowsWithin (src/graph/run-memory.ts): the documented estimate, worked by hand on a
 * three-node chain (exact arithmetic; the estimate's rules are the file's doc comment).
 */
import { describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { DEFAULT_RUN_BYTES, evenRows, rowsWithin, runBytesOption, runRowBytes } from '../../src/graph/run-memory.js';
import { writeOpGraph } from '../helpers/op-graph.js';

describe('runRowBytes', () => {
  // x [8] → Relu → a [8] → Concat(a, a) → b [16] → Relu → y [16]; the weights-free chain keeps sizes exact
  const model = loadModel(
    writeOpGraph({
      input: [8],
      nodes: [
        { op: 'Relu', inputs: ['x'], outputs: ['a'] },
        { op: 'Concat', inputs: ['a', 'a'], outputs: ['b'], attributes: { axis: 1 } },
        { op: 'Relu', inputs: ['b'], outputs: ['y'] },
      ],
      output: 'y',
    }),
  );
  const elements = new Map([['x', 8], ['a', 8], ['b', 16], ['y', 16]]);
  const size = (name: string) => elements.get(name);

  it('runRowBytes forward: inputs and fetched outputs twice, plus the largest node working set', () => {
    // fed x: 2·32; fetched y: 2·64; working sets: Relu 32+32, Concat 32+32+64 = 128, Relu 64+64 → 128
    expect(runRowBytes(model, size, { fed: ['x'], fetched: ['y'] })).toBe(64 + 128 + 128);
  });

  it('runRowBytes backward: every computed tensor kept and as much again in gradients, plus the working set', () => {
    // computed a, b, y: 32 + 64 + 64 = 160 → 2·160
    expect(runRowBytes(model, size, { fed: ['x'], fetched: ['y'], backward: true })).toBe(64 + 128 + 320 + 128);
    // tensors of unknown size (weights, shape arithmetic) count 0
    expect(runRowBytes(model, () => undefined, { fed: ['x'], fetched: ['y'] })).toBe(0);
  });
});

describe('rowsWithin', () => {
  it('rowsWithin floors the budget over the row bytes between least and most', () => {
    expect(rowsWithin(1000, 100, 16)).toBe(10);
    expect(rowsWithin(1000, 100, 4)).toBe(4);
    expect(rowsWithin(50, 100, 16)).toBe(1);
    expect(rowsWithin(50, 100, 16, 3)).toBe(3);
    expect(rowsWithin(1000, 0, 16)).toBe(16);
  });

  it('evenRows splits a total into the fewest calls within the cap, of nearly equal size', () => {
    expect(evenRows(16, 10)).toBe(8);
    expect(evenRows(16, 16)).toBe(16);
    expect(evenRows(16, 40)).toBe(16);
    expect(evenRows(17, 8)).toBe(6); // 3 calls: 6 + 6 + 5
    expect(evenRows(16, 1)).toBe(1);
    for (let total = 1; total <= 40; total++) {
      for (let cap = 1; cap <= 45; cap++) {
        const rows = evenRows(total, cap);
        expect(rows).toBeLessThanOrEqual(Math.max(1, cap));
        expect(Math.ceil(total / rows)).toBe(Math.ceil(total / Math.min(cap, total)));
      }
    }
  });

  it('runBytesOption defaults to DEFAULT_RUN_BYTES and refuses a budget that is not positive', () => {
    expect(runBytesOption(undefined)).toBe(DEFAULT_RUN_BYTES);
    expect(runBytesOption(2 ** 20)).toBe(2 ** 20);
    for (const bad of [0, -1, Number.NaN, Number.POSITIVE_INFINITY]) expect(() => runBytesOption(bad)).toThrow(/--run-memory/);
  });
});
