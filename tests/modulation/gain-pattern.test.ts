import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { gainFromValues, normaliseAcrossCategories, topChannels } from '../../src/modulation/gain-pattern.js';

describe('gainFromValues', () => {
  it('gainFromValues(v, β) equals max(0, 1 + β·v) and clamps at exactly 0', () => {
    // closed form g_k = max(0, 1 + β·v_k) (feature-similarity gain, ../shared/DOMAIN.md); values chosen
    // so every product is exact in binary floating point
    const v = Float64Array.from([-3, -1, 0, 0.5, 2]);
    expect(Array.from(gainFromValues(v, 0.5))).toEqual([0, 0.5, 1, 1.25, 2]);
    const g = gainFromValues(v, 1);
    expect(Array.from(g)).toEqual([0, 0, 1, 1.5, 3]);
    expect(Object.is(g[0], 0)).toBe(true); // +0, not -2 or -0
  });

  it('gainFromValues(v, β, { allowNegative: true }) skips the clamp', () => {
    const v = Float64Array.from([-3, -1, 0.5]);
    expect(Array.from(gainFromValues(v, 1, { allowNegative: true }))).toEqual([-2, 0, 1.5]);
  });

  it('gainFromValues(v, 0) is the identity gain 1 for every channel', () => {
    // exact property: 1 + 0·v = 1 for finite v
    const v = Float64Array.from([-1e6, -0.3, 0, 7, 1e-9]);
    expect(Array.from(gainFromValues(v, 0))).toEqual([1, 1, 1, 1, 1]);
  });

  it('gainFromValues(v, β) rejects NaN values and a non-finite strength', () => {
    expect(() => gainFromValues(Float64Array.from([0, Number.NaN]), 1)).toThrow(/values\[1\] is NaN/);
    expect(() => gainFromValues(Float64Array.from([0]), Number.POSITIVE_INFINITY)).toThrow(UsageError);
  });
});

describe('normaliseAcrossCategories', () => {
  it('normaliseAcrossCategories(rows) matches hand-computed z-scores (population SD)', () => {
    // channel 0: [3, 0, 0] → mean 1, variance (4 + 1 + 1)/3 = 2 → z = [2, −1, −1]/√2
    // channel 1: [1, 0, 2] → mean 1, variance 2/3 → z = [0, −1, 1]·√(3/2)
    // channel 2: [5, 5, 5] → zero variance → 0 (policy in ../shared/DOMAIN.md)
    const rows = [Float64Array.from([3, 1, 5]), Float64Array.from([0, 0, 5]), Float64Array.from([0, 2, 5])];
    const z = normaliseAcrossCategories(rows);
    const s2 = Math.SQRT2;
    const s32 = Math.sqrt(1.5);
    const expected = [
      [2 / s2, 0, 0],
      [-1 / s2, -s32, 0],
      [-1 / s2, s32, 0],
    ];
    for (let c = 0; c < 3; c++) for (let k = 0; k < 3; k++) expect(z[c]![k]!).toBeCloseTo(expected[c]![k]!, 12);
  });

  it('normaliseAcrossCategories(rows) gives every varying channel mean 0 and population SD 1, and is idempotent', () => {
    // exact properties of a z-score; checked on pseudo-random values to 1e-12
    const categories = 5;
    const channels = 7;
    const rows = Array.from({ length: categories }, (_, c) => Float64Array.from({ length: channels }, (_, k) => Math.sin(1 + c * 7.3 + k * 2.1) * (k + 1)));
    const z = normaliseAcrossCategories(rows);
    for (let k = 0; k < channels; k++) {
      let sum = 0;
      let squares = 0;
      for (let c = 0; c < categories; c++) sum += z[c]![k]!;
      const mean = sum / categories;
      for (let c = 0; c < categories; c++) squares += (z[c]![k]! - mean) ** 2;
      expect(Math.abs(mean)).toBeLessThan(1e-12);
      expect(Math.abs(Math.sqrt(squares / categories) - 1)).toBeLessThan(1e-12);
    }
    const again = normaliseAcrossCategories(z);
    for (let c = 0; c < categories; c++) for (let k = 0; k < channels; k++) expect(Math.abs(again[c]![k]! - z[c]![k]!)).toBeLessThan(1e-12);
  });

  it('normaliseAcrossCategories([row]) with one category gives 0 everywhere', () => {
    expect(Array.from(normaliseAcrossCategories([Float64Array.from([4, -2])])[0]!)).toEqual([0, 0]);
    expect(normaliseAcrossCategories([])).toEqual([]);
  });

  it('normaliseAcrossCategories(rows) rejects NaN and rows of different lengths', () => {
    expect(() => normaliseAcrossCategories([Float64Array.from([1, 2]), Float64Array.from([1])])).toThrow(/category 1 has 1 channels/);
    expect(() => normaliseAcrossCategories([Float64Array.from([1, Number.NaN])])).toThrow(/channel 1 is NaN/);
  });
});

describe('topChannels', () => {
  it('topChannels(v, k) picks the largest values first and breaks ties by lower index', () => {
    const v = Float64Array.from([0.5, 2, -1, 2, 0.5]);
    expect(topChannels(v, 1)).toEqual([1]);
    expect(topChannels(v, 3)).toEqual([1, 3, 0]);
    expect(topChannels(v, 5)).toEqual([1, 3, 0, 4, 2]);
  });

  it('topChannels(v, k) rejects k outside [1, C]', () => {
    expect(() => topChannels(Float64Array.from([1, 2]), 3)).toThrow(UsageError);
    expect(() => topChannels(Float64Array.from([1, 2]), 0)).toThrow(UsageError);
  });
});
