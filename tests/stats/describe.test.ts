import { describe as group, expect, it } from 'vitest';
import { describe, mean, median, quantile, quantileSorted, standardDeviation, variance } from '../../src/stats/describe.js';
import { createRandom } from '../../src/random.js';
import { UsageError } from '../../src/errors.js';
import { torchReference, TORCH } from '../helpers/torch-reference.js';

// Anscombe (1973), The American Statistician 27:17, set I (values in ../shared/DOMAIN.md).
const ANSCOMBE_X = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5];
const ANSCOMBE_Y1 = [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68];


group('describe', () => {
  it('describe(values) matches Anscombe set I: mean x 9, Σ(x − x̄)² = 110, mean y 7.50', () => {
    // Anscombe (1973) reports mean of x = 9.0, sum of squares of x − x̄ = 110.0, mean of y = 7.5
    // (the x statistics are exact: x is a permutation of 4…14).
    const x = describe(ANSCOMBE_X);
    expect(x.n).toBe(11);
    expect(x.mean).toBe(9);
    expect(x.variance).toBeCloseTo(110 / 10, 13);
    expect(x.min).toBe(4);
    expect(x.max).toBe(14);
    expect(x.nonFinite).toBe(0);
    const y = describe(ANSCOMBE_Y1);
    expect(Math.abs(y.mean - 7.5)).toBeLessThan(5e-3);
  });

  it('describe(values) keeps full precision for a large common offset', () => {
    // Exact property: 1e9 + {4, 7, 13, 16} has deviations −6, −3, 3, 6 from its mean 1e9 + 10, so the sample
    // variance is 90/3 = 30; a naive Σx² − (Σx)²/n loses every digit here (Welford's method does not).
    const d = describe([1e9 + 4, 1e9 + 7, 1e9 + 13, 1e9 + 16]);
    expect(d.mean).toBe(1e9 + 10);
    expect(d.variance).toBe(30);
    expect(variance(Float32Array.of(4, 7, 13, 16))).toBe(30);
  });

  it('describe(values) reports empty, single and non-finite samples without skipping', () => {
    const empty = describe([]);
    expect(empty.n).toBe(0);
    expect(empty.mean).toBeNaN();
    expect(empty.min).toBeNaN();
    const one = describe([3]);
    expect(one.mean).toBe(3);
    expect(one.variance).toBeNaN();
    const bad = describe([1, Number.NaN, 2, Number.POSITIVE_INFINITY]);
    expect(bad.nonFinite).toBe(2);
    expect(bad.mean).toBeNaN();
    expect(bad.min).toBeNaN();
    expect(describe([1, Number.POSITIVE_INFINITY]).mean).toBe(Number.POSITIVE_INFINITY);
  });

  it.skipIf(!TORCH)('describe(values) matches torch mean/var/std (unbiased) on seeded normal samples within 1e-13 relative', () => {
    // Independent reference: PyTorch (Debian python3-torch), float64.
    const random = createRandom(42);
    const samples = [5, 100, 1000].map((n) => Array.from({ length: n }, () => 3 + 2 * random.normal()));
    const reference = torchReference(
      'import json, sys, torch\nout = []\nfor s in json.load(sys.stdin):\n    t = torch.tensor(s, dtype=torch.float64)\n    out.append([t.mean().item(), t.var(unbiased=True).item(), t.std(unbiased=True).item()])\nprint(json.dumps(out))',
      samples,
    ) as number[][];
    samples.forEach((s, i) => {
      const [m, v, sd] = reference[i]!;
      expect(Math.abs(mean(s) - m!) / Math.abs(m!)).toBeLessThan(1e-13);
      expect(Math.abs(variance(s) - v!) / v!).toBeLessThan(1e-13);
      expect(Math.abs(standardDeviation(s) - sd!) / sd!).toBeLessThan(1e-13);
      expect(describe(s).variance).toBe(variance(s));
    });
  });
});

group('median', () => {
  it('median(values) averages the two middle values for even n and leaves the input alone', () => {
    const values = [5, 1, 4, 2];
    expect(median(values)).toBe(3);
    expect(values).toEqual([5, 1, 4, 2]);
    expect(median([7, 1, 3])).toBe(3);
    expect(median(Float32Array.of(2))).toBe(2);
  });

  it('median(values) is NaN for an empty sample or any NaN', () => {
    expect(median([])).toBeNaN();
    expect(median([1, Number.NaN, 3])).toBeNaN();
    expect(median([1, Number.POSITIVE_INFINITY, 3])).toBe(3);
  });
});

group('quantile', () => {
  it('quantile(values, p) interpolates linearly between order statistics (R type 7)', () => {
    // Definition in R's ?quantile, type 7: h = (n − 1)p, Q = x[⌊h⌋] + (h − ⌊h⌋)(x[⌊h⌋+1] − x[⌊h⌋]) (1-based x).
    // Hand-computed on 1, 2, 3, 4: p = 0.25 → h = 0.75 → 1.75; p = 0.5 → 2.5; p = 0.9 → h = 2.7 → 3.7.
    const x = [4, 2, 3, 1];
    expect(quantile(x, 0)).toBe(1);
    expect(quantile(x, 0.25)).toBe(1.75);
    expect(quantile(x, 0.5)).toBe(2.5);
    expect(quantile(x, 0.9)).toBeCloseTo(3.7, 14);
    expect(quantile(x, 1)).toBe(4);
    expect(quantile(x, 0.5)).toBe(median(x));
  });

  it.skipIf(!TORCH)('quantile(values, p) matches torch.quantile(interpolation="linear") on seeded data within 1e-14 relative', () => {
    // Independent reference: PyTorch's linear interpolation is the same definition as R's type 7.
    const random = createRandom(7);
    const sample = Array.from({ length: 37 }, () => random.normal() * 10);
    const ps = [0, 0.01, 0.025, 0.1, 0.25, 0.5, 0.75, 0.9, 0.975, 0.99, 1];
    const reference = torchReference(
      'import json, sys, torch\nd = json.load(sys.stdin)\nx = torch.tensor(d["x"], dtype=torch.float64)\nq = torch.tensor(d["p"], dtype=torch.float64)\nprint(json.dumps(torch.quantile(x, q, interpolation="linear").tolist()))',
      { x: sample, p: ps },
    ) as number[];
    ps.forEach((p, i) => {
      expect(Math.abs(quantile(sample, p) - reference[i]!)).toBeLessThanOrEqual(1e-14 * Math.abs(reference[i]!));
    });
  });

  it('quantile(values, p) rejects p outside [0, 1] and is NaN for empty or NaN samples', () => {
    expect(() => quantile([1, 2], 1.5)).toThrow(UsageError);
    expect(() => quantile([1, 2], Number.NaN)).toThrow(/outside \[0, 1\]/);
    expect(quantile([], 0.5)).toBeNaN();
    expect(quantile([1, Number.NaN], 0.5)).toBeNaN();
    // An exact order statistic next to an infinity stays finite (no 0·∞).
    expect(quantileSorted([1, 2, Number.POSITIVE_INFINITY], 0.5)).toBe(2);
  });
});
