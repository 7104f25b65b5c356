import { describe, expect, it } from 'vitest';
import { signFlipTest } from '../../src/stats/sign-flip.js';

describe('signFlipTest', () => {
  it('signFlipTest(all positive, n = 8) gives the exact minimum p = 1/256 (only the observed pattern is as large)', () => {
    // exact property of the randomisation distribution: 2^8 equally likely sign patterns
    const result = signFlipTest([0.3, 0.1, 0.5, 0.2, 0.4, 0.6, 0.7, 0.8]);
    expect(result.exact).toBe(true);
    expect(result.pValue).toBe(1 / 256);
    expect(result.mean).toBeCloseTo(0.45, 12);
  });

  it('signFlipTest of a hand-enumerated case: [1, 2, -3] has 2 of 8 patterns with sum ≥ 0', () => {
    // patterns of (±1, ±2, ±3): sums 6,4,2,0,0,-2,-4,-6 → observed sum 0 (1 + 2 − 3): 5 patterns ≥ 0
    const result = signFlipTest([1, 2, -3]);
    expect(result.pValue).toBe(5 / 8);
  });

  it('signFlipTest is symmetric: p(d) + p(−d) = 1 + P(sum = observed), which is 1/32 when all signed sums differ', () => {
    // powers of two: every sign pattern gives a different sum, so only the observed one equals it
    const d = [1, -2, 4, 8, -16];
    const a = signFlipTest(d);
    const b = signFlipTest(d.map((x) => -x));
    expect(a.pValue + b.pValue).toBeCloseTo(1 + 1 / 32, 12);
  });

  it('signFlipTest falls back to a seeded Monte Carlo estimate above 20 differences, reproducibly', () => {
    const d = Array.from({ length: 30 }, (_, i) => Math.sin(i) + 0.4);
    const a = signFlipTest(d, { samples: 20000, seed: 3 });
    const b = signFlipTest(d, { samples: 20000, seed: 3 });
    expect(a.exact).toBe(false);
    expect(a.pValue).toBe(b.pValue);
    expect(a.pValue).toBeLessThan(0.05);
  });

  it('signFlipTest rejects empty input and non-finite differences', () => {
    expect(() => signFlipTest([])).toThrow(/at least one/);
    expect(() => signFlipTest([1, Number.NaN])).toThrow(/NaN/);
  });
});
