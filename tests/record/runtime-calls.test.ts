import { describe, expect, it } from 'vitest';
import { runtimeCalls } from '../../src/record/runtime-calls.js';

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
