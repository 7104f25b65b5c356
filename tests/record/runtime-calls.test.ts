import { describe, expect, it } from 'vitest';
import { HEAP_BLOCK_BYTES, runRowBytes } from '../../src/graph/run-memory.js';
import { loadModel } from '../../src/graph/load-model.js';
import { callRows, runtimeCalls } from '../../src/record/runtime-calls.js';
import { writeOpGraph } from '../helpers/op-graph.js';

describe('runtimeCalls', () => {
  it('runtimeCalls(from, total, batch, perCall) covers the rows once, in order, without a call crossing a batch boundary (exact property)', () => {
    for (const [from, total, batch, perCall] of [[0, 11, 4, 1], [0, 11, 4, 3], [8, 11, 4, 4], [0, 10, 5, 2], [4, 4, 4, 2], [0, 7, 16, 16]] as const) {
      const calls = runtimeCalls(from, total, batch, perCall);
      let next = from;
      for (const call of calls) {
        expect(call.first).toBe(next);
        expect(call.rows).toBeGreaterThan(0);
        expect(call.rows).toBeLessThanOrEqual(perCall);
        expect(Math.floor(call.first / batch)).toBe(Math.floor((call.first + call.rows - 1) / batch));
        next += call.rows;
      }
      expect(next).toBe(Math.max(from, total));
    }
  });
});

describe('callRows', () => {
  // x [8] → Relu → y [8]: a weights-free graph whose sizes the test sets through `elements`
  const model = loadModel(writeOpGraph({ input: [8], nodes: [{ op: 'Relu', inputs: ['x'], outputs: ['y'] }], output: 'y' }));
  const rows = (yElements: number, batch: number, runBytes?: number) =>
    callRows({ model, fetched: ['y'], inputElements: 8, elements: (name) => (name === 'y' ? yElements : 8), batch, fixedBatch: null, runBytes });

  it('callRows keeps every fetched tensor of a call within HEAP_BLOCK_BYTES (glibc\'s largest mmap threshold on 64-bit, 32 MiB: malloc.c DEFAULT_MMAP_THRESHOLD_MAX) and splits the batch evenly', () => {
    expect(HEAP_BLOCK_BYTES).toBe(32 * 2 ** 20);
    // VGG16's conv1 output at 224 px: 64 × 224 × 224 float32 = 12.25 MiB a stimulus → 2 a call (24.5 MiB), 8 as 2+2+2+2
    expect(rows(64 * 224 * 224, 8, 1e15)).toBe(2);
    // a sixteenth of the block a stimulus (4 bytes an element): 4 fit; one element more: 3 (16 rows as 6 calls of at most 3)
    expect(rows(HEAP_BLOCK_BYTES / 16, 16, 1e15)).toBe(4);
    expect(rows(HEAP_BLOCK_BYTES / 16 + 1, 16, 1e15)).toBe(3);
    // a tensor larger than the block still gets one stimulus a call
    expect(rows(HEAP_BLOCK_BYTES, 8, 1e15)).toBe(1);
    // small tensors: the batch, unless the run-bytes budget says less; 16 under a cap of 10 as 8 + 8
    expect(rows(1000, 16, 1e15)).toBe(16);
    const rowBytes = runRowBytes(model, (name) => (name === 'y' ? 1000 : 8), { fed: ['x'], fetched: ['y'] });
    expect(rows(1000, 16, 10 * rowBytes)).toBe(8);
  });

  it('callRows gives a fixed-batch model its batch', () => {
    expect(callRows({ model, fetched: ['y'], inputElements: 8, elements: () => 64 * 224 * 224, batch: 8, fixedBatch: 1 })).toBe(1);
  });
});
