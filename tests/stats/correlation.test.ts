import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { averageRanks, linearFit, pearson, spearman } from '../../src/stats/correlation.js';
import { UsageError } from '../../src/errors.js';
import { createRandom } from '../../src/random.js';
import { torchReference, TORCH } from '../helpers/torch-reference.js';

// Anscombe (1973), The American Statistician 27:17. Set I is in ../shared/DOMAIN.md; sets II–IV are
// recalled from memory. The paper's point is that all four share mean x 9, mean y 7.50, the line
// y = 3.00 + 0.500x and r = 0.816, so a misremembered value would make its set fail below.
const X_123 = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5];
const ANSCOMBE = [
  { name: 'I', x: X_123, y: [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68] },
  { name: 'II', x: X_123, y: [9.14, 8.14, 8.74, 8.77, 9.26, 8.1, 6.13, 3.1, 9.13, 7.26, 4.74] },
  { name: 'III', x: X_123, y: [7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73] },
  { name: 'IV', x: [8, 8, 8, 8, 8, 8, 8, 19, 8, 8, 8], y: [6.58, 5.76, 7.71, 8.84, 8.47, 7.04, 5.25, 12.5, 5.56, 7.91, 6.89] },
];


describe('pearson', () => {
  it('pearson(x, y) matches Anscombe set I: r ≈ 0.816', () => {
    expect(Math.abs(pearson(ANSCOMBE[0]!.x, ANSCOMBE[0]!.y) - 0.816)).toBeLessThan(5e-4);
  });

  it('pearson(x, y) is invariant to affine maps of either variable (sign follows the slopes)', () => {
    // Exact property: r(a·x + b, c·y + d) = sign(a·c)·r(x, y).
    const sample = fc
      .array(fc.tuple(fc.integer({ min: -50, max: 50 }), fc.integer({ min: -50, max: 50 })), { minLength: 3, maxLength: 40 })
      .filter((pairs) => new Set(pairs.map((p) => p[0])).size > 1 && new Set(pairs.map((p) => p[1])).size > 1);
    const scale = fc.double({ min: 0.01, max: 100, noNaN: true });
    const shift = fc.double({ min: -1e4, max: 1e4, noNaN: true });
    fc.assert(
      fc.property(sample, scale, shift, scale, shift, fc.boolean(), (pairs, a, b, c, d, flip) => {
        const x = pairs.map((p) => p[0]);
        const y = pairs.map((p) => p[1]);
        const r = pearson(x, y);
        const sign = flip ? -1 : 1;
        const mapped = pearson(
          x.map((v) => sign * a * v + b),
          y.map((v) => c * v + d),
        );
        return Math.abs(mapped - sign * r) < 1e-9;
      }),
      { seed: 1973, numRuns: 300 },
    );
  });

  it('pearson(x, y) is NaN for constant or short input and for NaN values; lengths must match', () => {
    expect(pearson([1, 1, 1], [1, 2, 3])).toBeNaN();
    // 0.1 three times: the mean must come out as exactly 0.1, or rounding would fake a spread.
    expect(pearson([0.1, 0.1, 0.1], [1, 2, 3])).toBeNaN();
    expect(pearson([1], [2])).toBeNaN();
    expect(pearson([1, Number.NaN, 3], [1, 2, 3])).toBeNaN();
    expect(() => pearson([1, 2], [1, 2, 3])).toThrow(UsageError);
    expect(() => pearson([1, 2], [1, 2, 3])).toThrow(/x has 2 values but y has 3/);
    expect(pearson([1, 2, 3], [1, 2, 3])).toBe(1);
    expect(pearson([1, 2, 3], [3, 2, 1])).toBe(-1);
  });
});

describe('linearFit', () => {
  it('linearFit(x, y) matches Anscombe sets I–IV: y ≈ 3.00 + 0.500x, r ≈ 0.816, mean y ≈ 7.50', () => {
    // Published to the stated decimals, so the tolerances are half a unit in the last published digit,
    // except r: the paper's common "0.816" is itself rounded across sets (set IV's r is 0.8165…), so 1e-3.
    for (const set of ANSCOMBE) {
      const fit = linearFit(set.x, set.y);
      expect(fit.n, set.name).toBe(11);
      expect(Math.abs(fit.slope - 0.5), set.name).toBeLessThan(5e-4);
      expect(Math.abs(fit.intercept - 3.0), set.name).toBeLessThan(5e-3);
      expect(Math.abs(fit.r - 0.816), set.name).toBeLessThan(1e-3);
      expect(Math.abs(fit.intercept + fit.slope * 9 - 7.5), set.name).toBeLessThan(5e-3);
    }
  });

  it('linearFit(x, y) recovers an exact line and handles constant inputs', () => {
    // Exact property: points on y = 1.25 − 0.5x (dyadic values) give that line back exactly.
    const x = [0, 0.25, 0.5, 0.75, 1];
    const fit = linearFit(x, x.map((v) => 1.25 - 0.5 * v));
    expect(fit.slope).toBe(-0.5);
    expect(fit.intercept).toBe(1.25);
    expect(fit.r).toBe(-1);
    const flatY = linearFit([1, 2, 3], [4, 4, 4]);
    expect(flatY.slope).toBe(0);
    expect(flatY.intercept).toBe(4);
    expect(flatY.r).toBeNaN();
    const flatX = linearFit([2, 2, 2], [1, 2, 3]);
    expect(flatX.slope).toBeNaN();
    expect(flatX.intercept).toBeNaN();
  });

  it.skipIf(!TORCH)('linearFit(x, y) and pearson(x, y) match torch.linalg.lstsq and torch.corrcoef on seeded data within 1e-12', () => {
    // Independent reference: PyTorch (Debian python3-torch), float64, least squares on [1, x].
    const random = createRandom(2024);
    const x = Array.from({ length: 200 }, () => 1e3 + random.normal());
    const y = x.map((v) => 4 - 2 * v + 0.5 * random.normal());
    const [intercept, slope, r] = torchReference(
      'import json, sys, torch\nd = json.load(sys.stdin)\nx = torch.tensor(d["x"], dtype=torch.float64)\ny = torch.tensor(d["y"], dtype=torch.float64)\n' +
        'A = torch.stack([torch.ones_like(x), x - x.mean()], 1)\nb = torch.linalg.lstsq(A, y.unsqueeze(1)).solution.squeeze(1)\n' +
        'print(json.dumps([(b[0] - b[1] * x.mean()).item(), b[1].item(), torch.corrcoef(torch.stack([x, y]))[0, 1].item()]))',
      { x, y },
    ) as number[];
    const fit = linearFit(x, y);
    expect(Math.abs(fit.slope - slope!) / Math.abs(slope!)).toBeLessThan(1e-12);
    expect(Math.abs(fit.intercept - intercept!) / Math.abs(intercept!)).toBeLessThan(1e-10);
    expect(Math.abs(pearson(x, y) - r!)).toBeLessThan(1e-12);
  });
});

describe('spearman', () => {
  it('spearman(x, y) matches the IQ / television worked example: ρ = −29/165', () => {
    // Worked example of the Wikipedia article "Spearman's rank correlation coefficient" (IQ of 10 people
    // against hours of TV per week); the numbers are recalled from memory and were re-derived by hand here:
    // Σd² = 194, so ρ = 1 − 6·194/(10·99) = −29/165 ≈ −0.1758 (no ties, so the shortcut formula is exact).
    const iq = [106, 100, 86, 101, 99, 103, 97, 113, 112, 110];
    const tv = [7, 27, 2, 50, 28, 29, 20, 12, 6, 17];
    expect(Math.abs(spearman(iq, tv) - -29 / 165)).toBeLessThan(1e-14);
  });

  it('spearman(x, y) uses average ranks for ties', () => {
    // Hand-computed: ranks of 1, 2, 2, 3 are 1, 2.5, 2.5, 4; against 1…4 the centred sums are
    // Sxy = 4.5, Sxx = 4.5, Syy = 5, so ρ = 4.5/√22.5 = 0.9486832980505138.
    expect(Math.abs(spearman([1, 2, 2, 3], [1, 2, 3, 4]) - 4.5 / Math.sqrt(22.5))).toBeLessThan(1e-15);
    expect(Array.from(averageRanks([10, 20, 20, 30, 20]))).toEqual([1, 3, 3, 5, 3]);
  });

  it('spearman(x, f(x)) = 1 for increasing f and −1 for decreasing f', () => {
    // Exact property: Spearman's ρ depends on ranks only, and a strictly monotone map keeps (or reverses) them.
    const distinct = fc.uniqueArray(fc.integer({ min: -1000, max: 1000 }), { minLength: 2, maxLength: 50 });
    fc.assert(
      fc.property(distinct, (x) => {
        const cubic = x.map((v) => v * v * v + v);
        const exp = x.map((v) => Math.exp(v / 100));
        const decreasing = x.map((v) => -Math.atan(v));
        return spearman(x, cubic) === 1 && spearman(x, exp) === 1 && spearman(x, decreasing) === -1;
      }),
      { seed: 1904, numRuns: 300 },
    );
  });

  it('spearman(x, y) is NaN with NaN values or a constant sample', () => {
    expect(spearman([1, 2, Number.NaN], [1, 2, 3])).toBeNaN();
    expect(spearman([5, 5, 5], [1, 2, 3])).toBeNaN();
    expect(() => spearman([1], [1, 2])).toThrow(UsageError);
  });
});
