import { describe, expect, it } from 'vitest';
import { windowWeights } from '../../src/modulation/window.js';

const closeRelative = (actual: number, expected: number, tolerance: number): void => {
  expect(Math.abs(actual - expected)).toBeLessThanOrEqual(tolerance * Math.abs(expected));
};

describe('windowWeights', () => {
  it('windowWeights(gaussian, 4, 4) equals exp(−d²/2σ²) at hand-computed pixel centres', () => {
    // closed form; pixel centres at ((j + 0.5)/W, (i + 0.5)/H); cx = cy = 0.5, σ = 0.25 → 2σ² = 0.125
    const w = windowWeights({ shape: 'gaussian', cx: 0.5, cy: 0.5, sigma: 0.25, outside: 1 }, 4, 4);
    // (0,0): centre (0.125, 0.125): d² = 2·0.375² = 0.28125 → exp(−2.25)
    closeRelative(w[0]!, Math.exp(-2.25), 1e-7);
    // (row 0, col 1): centre (0.375, 0.125): d² = 0.015625 + 0.140625 = 0.15625 → exp(−1.25)
    closeRelative(w[1]!, Math.exp(-1.25), 1e-7);
    // (1,1) and (1,2): d² = 2·0.125² = 0.03125 → exp(−0.25)
    closeRelative(w[1 * 4 + 1]!, Math.exp(-0.25), 1e-7);
    closeRelative(w[1 * 4 + 2]!, Math.exp(-0.25), 1e-7);
    // symmetry: (3,3) mirrors (0,0)
    expect(w[15]).toBe(w[0]);
  });

  it('windowWeights(gaussian, 2, 4) measures distance in map-relative units on a non-square map', () => {
    // cx = cy = 0, σ = 0.5 → 2σ² = 0.5; (row 1, col 3): centre (0.875, 0.75): d² = 0.765625 + 0.5625
    const w = windowWeights({ shape: 'gaussian', cx: 0, cy: 0, sigma: 0.5, outside: 1 }, 2, 4);
    closeRelative(w[1 * 4 + 3]!, Math.exp(-1.328125 / 0.5), 1e-7);
    // (row 0, col 0): centre (0.125, 0.25): d² = 0.015625 + 0.0625 = 0.078125
    closeRelative(w[0]!, Math.exp(-0.078125 / 0.5), 1e-7);
  });

  it('windowWeights(box) includes a pixel whose centre lies on x0 and excludes one on x1', () => {
    // W = 4: centres 0.125, 0.375, 0.625, 0.875 (all exact in binary); box [0.375, 0.625) holds column 1 only
    const w = windowWeights({ shape: 'box', x0: 0.375, x1: 0.625, y0: 0, y1: 1, outside: 1 }, 2, 4);
    expect(Array.from(w)).toEqual([0, 1, 0, 0, 0, 1, 0, 0]);
    // rows: H = 4 centres 0.125 … 0.875; box y ∈ [0.125, 0.375) holds row 0 only
    const rows = windowWeights({ shape: 'box', x0: 0, x1: 1, y0: 0.125, y1: 0.375, outside: 1 }, 4, 1);
    expect(Array.from(rows)).toEqual([1, 0, 0, 0]);
  });

  it('windowWeights(box) of two adjacent half-open boxes tiles the map exactly once', () => {
    // exact property of half-open intervals [0, 0.5) ∪ [0.5, 1)
    for (const size of [1, 2, 3, 5, 8]) {
      const left = windowWeights({ shape: 'box', x0: 0, x1: 0.5, y0: 0, y1: 1, outside: 1 }, 3, size);
      const right = windowWeights({ shape: 'box', x0: 0.5, x1: 1, y0: 0, y1: 1, outside: 1 }, 3, size);
      for (let i = 0; i < left.length; i++) expect(left[i]! + right[i]!).toBe(1);
    }
  });

  it('windowWeights(box, 0, 4) rejects a non-positive map size', () => {
    expect(() => windowWeights({ shape: 'box', x0: 0, x1: 1, y0: 0, y1: 1, outside: 1 }, 0, 4)).toThrow(/map size/);
  });
});
