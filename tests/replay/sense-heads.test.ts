import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { foldHeads } from '../../src/replay/sense-heads.js';
import type { SiteSensitivity } from '../../src/replay/sense-types.js';

function block(values: number[], F: number, K: number): SiteSensitivity {
  return {
    layer: 'att', depth: 3, op: 'Reshape', channels: F, categories: Array.from({ length: K }, (_, c) => `c${c}`), sensitivity: Float64Array.from(values),
    fdError: Float64Array.from(values, (v) => Math.abs(v) / 10), kind: 'gain', step: 0, method: 'exact', extrapolationShift: null, count: new Int32Array(K).fill(2),
    worstErrorRatio: 0, runs: 1, rows: 2, skippedRows: 0, prefixRuns: 0, tailSeconds: 0, prefixSeconds: 0, wallSeconds: 0, downstreamShare: 0.5, forwardEquivalentsPerChannel: 1, prefixStimuli: 0, stimuliUsed: 2,
  } as SiteSensitivity;
}

describe('foldHeads', () => {
  it('foldHeads(block, H) sums each head\'s d = F / H features per category (chain rule: one gain shared by the head\'s features)', () => {
    // F = 4 features, K = 2 categories, [F, K]: i = f*K + c; 2 heads of 2 features
    const folded = foldHeads(block([1, 10, 2, 20, 3, 30, 4, 40], 4, 2), 2);
    expect(folded.channels).toBe(2);
    expect(folded.unit).toBe('head');
    expect(Array.from(folded.sensitivity)).toEqual([3, 30, 7, 70]);
    expect(Array.from(folded.fdError, (v) => Number(v.toFixed(12)))).toEqual([0.3, 3, 0.7, 7]); // summed too: a bound on the folded error
    // one head is the whole feature axis; F heads leave the values as they are
    expect(Array.from(foldHeads(block([1, 10, 2, 20, 3, 30, 4, 40], 4, 2), 1).sensitivity)).toEqual([10, 100]);
    expect(Array.from(foldHeads(block([1, 10, 2, 20, 3, 30, 4, 40], 4, 2), 4).sensitivity)).toEqual([1, 10, 2, 20, 3, 30, 4, 40]);
  });

  it('foldHeads(block, H) refuses a head count that does not divide the features, and shard sums', () => {
    expect(() => foldHeads(block([1, 2, 3], 3, 1), 2)).toThrow(UsageError);
    expect(() => foldHeads({ ...block([1, 2], 2, 1), sums: { variants: 1, perturbed: new Float64Array(2), identity: new Float64Array(1), counts: new Int32Array(1) } }, 1)).toThrow(/--per head cannot be combined with --shard/);
  });
});
