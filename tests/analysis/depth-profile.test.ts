import { describe, expect, it } from 'vitest';
import { depthTrend, fitDepthProfile } from '../../src/analysis/depth-profile.js';
import { UsageError } from '../../src/errors.js';

describe('fitDepthProfile', () => {
  it('fitDepthProfile(0.5·2^(−d/1.7)) gives half-depth 1.7 and r² = 1', () => {
    // Exact property: ln(0.5·2^(−d/1.7)) = ln 0.5 − (ln 2 / 1.7)·d, a straight line of slope −ln 2 / 1.7.
    const points = [0, 1, 2, 3, 4, 5, 6].map((depth) => ({ depth, value: 0.5 * 2 ** (-depth / 1.7) }));
    const profile = fitDepthProfile(points);
    expect(Math.abs(profile.halfDepth! - 1.7)).toBeLessThan(1e-9);
    expect(profile.doublingDepth).toBeNull();
    expect(Math.abs(profile.rate + Math.LN2 / 1.7)).toBeLessThan(1e-12);
    expect(Math.abs(profile.intercept - Math.log(0.5))).toBeLessThan(1e-12);
    expect(Math.abs(profile.r2 - 1)).toBeLessThan(1e-12);
    expect(profile.used).toBe(7);
    expect(profile.excluded).toBe(0);
  });

  it('fitDepthProfile(growing values) gives the doubling depth', () => {
    // Exact property: 0.01·2^(d/2.5) doubles every 2.5 layers.
    const profile = fitDepthProfile([3, 0, 2, 1].map((depth) => ({ depth, value: 0.01 * 2 ** (depth / 2.5) })));
    expect(Math.abs(profile.doublingDepth! - 2.5)).toBeLessThan(1e-9);
    expect(profile.halfDepth).toBeNull();
  });

  it('fitDepthProfile(points, { floor }) excludes and counts values at or below the floor, zero, negative and NaN', () => {
    const points = [
      { depth: 0, value: 0.4 },
      { depth: 1, value: 0.2 },
      { depth: 2, value: 0.1 },
      { depth: 3, value: 1e-7 }, // below the floor
      { depth: 4, value: 0 },
      { depth: 5, value: -0.1 },
      { depth: 6, value: Number.NaN },
      { depth: Number.NaN, value: 0.3 },
    ];
    const profile = fitDepthProfile(points, { floor: 1e-6 });
    expect(profile.used).toBe(3);
    expect(profile.excluded).toBe(5);
    // The three used points halve every layer exactly.
    expect(Math.abs(profile.halfDepth! - 1)).toBeLessThan(1e-12);
  });

  it('fitDepthProfile(too few points) returns NaN rate and no depths', () => {
    const one = fitDepthProfile([{ depth: 0, value: 0.3 }]);
    expect(one.rate).toBeNaN();
    expect(one.halfDepth).toBeNull();
    expect(one.doublingDepth).toBeNull();
    const sameDepth = fitDepthProfile([
      { depth: 2, value: 0.3 },
      { depth: 2, value: 0.1 },
    ]);
    expect(sameDepth.rate).toBeNaN();
    const flat = fitDepthProfile([
      { depth: 0, value: 0.3 },
      { depth: 1, value: 0.3 },
    ]);
    expect(flat.rate).toBe(0);
    expect(flat.halfDepth).toBeNull();
    expect(flat.doublingDepth).toBeNull();
    expect(() => fitDepthProfile([], { floor: Number.NaN })).toThrow(UsageError);
  });
});

describe('depthTrend', () => {
  it('depthTrend(rate, span) is flat below a fitted change of 0.05 over the span, else halves or doubles by the sign of the rate', () => {
    // Exact arithmetic on the rule: |rate| · span < 0.05.
    expect(depthTrend(-0.01, 4)).toBe('flat'); // 0.04
    expect(depthTrend(0.0049, 10)).toBe('flat'); // 0.049
    expect(depthTrend(-0.01, 6)).toBe('halves'); // 0.06
    expect(depthTrend(0.02, 3)).toBe('doubles'); // 0.06
    expect(depthTrend(0, 9)).toBe('flat');
    expect(depthTrend(-0.2, 0)).toBe('halves'); // a span below 1 counts as 1
    expect(depthTrend(Number.NaN, 5)).toBe('unfit');
  });
});
