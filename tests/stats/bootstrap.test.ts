import { describe, expect, it } from 'vitest';
import { bootstrapInterval, bootstrapIntervals } from '../../src/stats/bootstrap.js';
import { UsageError } from '../../src/errors.js';
import { createRandom } from '../../src/random.js';

function sampleMean(data: Float64Array): (indices: Int32Array) => number {
  return (indices) => {
    let sum = 0;
    for (let i = 0; i < indices.length; i++) sum += data[indices[i]!]!;
    return sum / indices.length;
  };
}

const random = createRandom('bootstrap-test-data');
const DATA = Float64Array.from({ length: 40 }, () => 10 + 3 * random.normal());

describe('bootstrapInterval', () => {
  it('bootstrapInterval(n, statistic, { seed }) is reproducible and depends on the seed', () => {
    const a = bootstrapInterval(DATA.length, sampleMean(DATA), { resamples: 500, seed: 11 });
    const b = bootstrapInterval(DATA.length, sampleMean(DATA), { resamples: 500, seed: 11 });
    const c = bootstrapInterval(DATA.length, sampleMean(DATA), { resamples: 500, seed: 12 });
    expect(b).toEqual(a);
    expect(c.low).not.toBe(a.low);
    expect(a.estimate).toBe(sampleMean(DATA)(Int32Array.from(DATA.keys())));
    expect(a.low).toBeLessThan(a.estimate);
    expect(a.high).toBeGreaterThan(a.estimate);
    expect(a.resamples).toBe(500);
    expect(a.level).toBe(0.95);
  });

  it('bootstrapInterval(mean) has the ideal bootstrap standard error √(Σ(x − x̄)²)/n within 3%', () => {
    // Exact property of the ideal bootstrap (Efron & Tibshirani 1993, An Introduction to the Bootstrap, §5.2):
    // the bootstrap standard error of the mean is the plug-in sd / √n. With 20 000 resamples the Monte Carlo
    // error of the sd estimate is about 1/√(2·20000) = 0.5%, so 3% leaves a wide margin.
    const n = DATA.length;
    let m = 0;
    for (const x of DATA) m += x / n;
    let ss = 0;
    for (const x of DATA) ss += (x - m) ** 2;
    const ideal = Math.sqrt(ss) / n;
    const result = bootstrapInterval(n, sampleMean(DATA), { resamples: 20_000, seed: 'se' });
    expect(Math.abs(result.sd / ideal - 1)).toBeLessThan(0.03);
    // The mean of a normal sample is close to normal, so the 95% percentile interval is ≈ x̄ ± 1.96·se
    // (common practice as a sanity band; 10% of the half-width).
    expect(Math.abs(result.high - result.estimate - 1.96 * ideal)).toBeLessThan(0.1 * 1.96 * ideal);
    expect(Math.abs(result.estimate - result.low - 1.96 * ideal)).toBeLessThan(0.1 * 1.96 * ideal);
  });

  it('bootstrapInterval(n, statistic) passes n indices in [0, n) and narrows with the level', () => {
    let calls = 0;
    const checked = (indices: Int32Array): number => {
      calls++;
      expect(indices.length).toBe(7);
      for (const i of indices) {
        expect(i).toBeGreaterThanOrEqual(0);
        expect(i).toBeLessThan(7);
      }
      return indices[0]!;
    };
    bootstrapInterval(7, checked, { resamples: 50, seed: 1 });
    expect(calls).toBe(51); // the estimate plus 50 replicates
    const wide = bootstrapInterval(DATA.length, sampleMean(DATA), { resamples: 2000, seed: 3, level: 0.99 });
    const narrow = bootstrapInterval(DATA.length, sampleMean(DATA), { resamples: 2000, seed: 3, level: 0.5 });
    expect(narrow.low).toBeGreaterThan(wide.low);
    expect(narrow.high).toBeLessThan(wide.high);
  });

  it('bootstrapInterval(n, constant statistic) collapses to the constant', () => {
    const result = bootstrapInterval(5, () => 2.5, { resamples: 100, seed: 0 });
    expect(result).toMatchObject({ estimate: 2.5, low: 2.5, high: 2.5, sd: 0, excluded: 0 });
  });

  it('bootstrapInterval(n, statistic) counts and excludes NaN and infinite replicates', () => {
    // The statistic is undefined (NaN) whenever unit 0 is missing from the resample and infinite when it is
    // drawn 3+ times; the count of such replicates must come back as `excluded`.
    let bad = 0;
    let calls = 0;
    const statistic = (indices: Int32Array): number => {
      calls++;
      let zeros = 0;
      for (const i of indices) if (i === 0) zeros++;
      const value = zeros === 0 ? Number.NaN : zeros >= 3 ? Number.POSITIVE_INFINITY : zeros;
      if (calls > 1 && !Number.isFinite(value)) bad++;
      return value;
    };
    const result = bootstrapInterval(6, statistic, { resamples: 400, seed: 9 });
    expect(result.excluded).toBe(bad);
    expect(bad).toBeGreaterThan(0);
    expect(Number.isFinite(result.low) && Number.isFinite(result.high)).toBe(true);
    const allBad = bootstrapInterval(3, () => Number.NaN, { resamples: 10, seed: 1 });
    expect(allBad.excluded).toBe(10);
    expect(allBad.low).toBeNaN();
    expect(allBad.sd).toBeNaN();
  });

  it('bootstrapInterval(n, statistic, options) rejects bad sizes and levels', () => {
    expect(() => bootstrapInterval(0, () => 1, { resamples: 10, seed: 1 })).toThrow(UsageError);
    expect(() => bootstrapInterval(3, () => 1, { resamples: 0, seed: 1 })).toThrow(/resamples = 0/);
    expect(() => bootstrapInterval(3, () => 1, { resamples: 2.5, seed: 1 })).toThrow(UsageError);
    expect(() => bootstrapInterval(3, () => 1, { resamples: 10, seed: 1, level: 1 })).toThrow(/level 1 is not in \(0, 1\)/);
  });
});

describe('bootstrapIntervals', () => {
  it('bootstrapIntervals(n, statistics, 2) gives each statistic the interval it gets alone with the same seed', () => {
    // The resamples depend only on the seed, so computing two statistics together must give the same
    // replicates as computing each by itself.
    const mean = sampleMean(DATA);
    const maxOf = (indices: Int32Array): number => {
      let best = Number.NEGATIVE_INFINITY;
      for (const i of indices) best = Math.max(best, DATA[i]!);
      return best;
    };
    const [both0, both1] = bootstrapIntervals(
      DATA.length,
      (indices, out) => {
        out[0] = mean(indices);
        out[1] = maxOf(indices);
      },
      2,
      { resamples: 300, seed: 'pair' },
    );
    expect(both0).toEqual(bootstrapInterval(DATA.length, mean, { resamples: 300, seed: 'pair' }));
    expect(both1).toEqual(bootstrapInterval(DATA.length, maxOf, { resamples: 300, seed: 'pair' }));
  });
});
