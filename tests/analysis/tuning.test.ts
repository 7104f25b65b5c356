import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { computeTuning, tuningColumn } from '../../src/analysis/tuning.js';
import { UsageError } from '../../src/errors.js';

// A hand-made layer of 3 channels over 6 search displays. Display 3 shows a cross and a bar (multi-label),
// display 5 shows nothing from the category list. Channel 1 is constant (zero variance).
//                  d0  d1  d2  d3  d4  d5
const CHANNEL_0 = [2, 4, 1, 3, 5, 100];
const CHANNEL_1 = [7, 7, 7, 7, 7, 7];
const CHANNEL_2 = [0, 0, 6, 2, 0, 9];
const LABELS = [['ring'], ['ring'], ['cross'], ['cross', 'bar'], ['bar'], ['tee']];
const CATEGORIES = ['ring', 'cross', 'bar'];

function layer(columns: number[][]): Float32Array {
  const N = columns[0]!.length;
  const C = columns.length;
  const out = new Float32Array(N * C);
  for (let n = 0; n < N; n++) for (let k = 0; k < C; k++) out[n * C + k] = columns[k]![n]!;
  return out;
}

describe('computeTuning', () => {
  it('computeTuning(hand-made layer) gives the hand-computed means, errors, counts and z-scores', () => {
    const table = computeTuning({ channelMeans: layer([CHANNEL_0, CHANNEL_1, CHANNEL_2]), stimuli: 6, channels: 3, labels: LABELS, categories: CATEGORIES });
    // Multi-label rule: display 3 counts for both cross and bar, so every category has 2 displays.
    expect(Array.from(table.count)).toEqual([2, 2, 2]);
    expect(table.stimuliUsed).toBe(5);
    expect(table.stimuliSkipped).toBe(1);
    // Means (hand-computed): channel 0: ring (2+4)/2 = 3, cross (1+3)/2 = 2, bar (3+5)/2 = 4; channel 2: 0, 4, 1.
    expect(Array.from(table.mean)).toEqual([3, 2, 4, 7, 7, 7, 0, 4, 1]);
    // Standard errors: sample sd / √2 — channel 0: 1, 1, 1; channel 1: 0; channel 2: 0, 2, 1.
    const sem = Array.from(table.sem);
    [1, 1, 1, 0, 0, 0, 0, 2, 1].forEach((expected, i) => expect(sem[i]).toBeCloseTo(expected, 14));
    // z-scores with the population sd over categories: channel 0 deviations 0, −1, 1 with sd √(2/3)
    // give 0, ∓√1.5; channel 2 deviations −5/3, 7/3, −2/3 with sd √26/3 give (−5, 7, −2)/√26.
    const t = Array.from(table.tuning);
    const expected = [0, -Math.sqrt(1.5), Math.sqrt(1.5), 0, 0, 0, -5 / Math.sqrt(26), 7 / Math.sqrt(26), -2 / Math.sqrt(26)];
    expected.forEach((value, i) => expect(Math.abs(t[i]! - value)).toBeLessThan(1e-14));
    // Zero-variance flag, preference and selectivity (r_max − r_rest)/(r_max + r_rest): channel 0 (4 − 2.5)/(4 + 2.5) = 3/13,
    // channel 1 0, channel 2 (4 − 0.5)/(4 + 0.5) = 7/9.
    expect(Array.from(table.zeroVariance)).toEqual([0, 1, 0]);
    expect(Array.from(table.preferred)).toEqual([2, -1, 1]);
    expect(table.selectivity[0]).toBeCloseTo(3 / 13, 15);
    expect(table.selectivity[1]).toBe(0);
    expect(table.selectivity[2]).toBeCloseTo(7 / 9, 15);
    expect(Array.from(table.nonFinite)).toEqual([0, 0, 0]);
  });

  it('computeTuning({ singleLabel: true }) uses only displays with exactly one label', () => {
    const table = computeTuning({ channelMeans: layer([CHANNEL_0, CHANNEL_1, CHANNEL_2]), stimuli: 6, channels: 3, labels: LABELS, categories: CATEGORIES, singleLabel: true });
    // Display 3 (cross + bar) drops out: cross = {d2}, bar = {d4}; one display each, so no standard error.
    expect(Array.from(table.count)).toEqual([2, 1, 1]);
    expect(Array.from(table.mean.subarray(0, 3))).toEqual([3, 1, 5]);
    expect(table.sem[1]).toBeNaN();
    // Channel 0: deviations 0, −2, 2, population sd √(8/3) → 0, ∓√1.5.
    expect(Math.abs(table.tuning[2]! - Math.sqrt(1.5))).toBeLessThan(1e-14);
    expect(table.stimuliUsed).toBe(4); // d0, d1, d2, d4; d5's single label is not a category
  });

  it('computeTuning(labels) counts a label repeated within one display once', () => {
    const labels = [['ring'], ['ring', 'ring'], ['cross'], ['cross']];
    const table = computeTuning({ channelMeans: Float32Array.of(1, 3, 5, 7), stimuli: 4, channels: 1, labels, categories: ['ring', 'cross'] });
    expect(Array.from(table.count)).toEqual([2, 2]);
    expect(Array.from(table.mean)).toEqual([2, 6]);
    // With two categories the z-scores are exactly ∓1 (population sd = half the difference).
    expect(Array.from(table.tuning)).toEqual([-1, 1]);
  });

  it('computeTuning(channel means) gives z-scores that sum to 0 with squares summing to K, invariant to a positive affine map', () => {
    // Exact properties of a z-score with the population sd: Σ_c t = 0, Σ_c t² = K; and t is unchanged when a
    // channel's responses are mapped r → a·r + b with a > 0. Selectivity of non-negative responses is in [0, 1].
    const K = 4;
    const displays = fc.array(fc.tuple(fc.integer({ min: 0, max: K - 1 }), fc.integer({ min: 0, max: 1000 })), { minLength: 8, maxLength: 40 });
    fc.assert(
      fc.property(displays, fc.integer({ min: 1, max: 50 }), fc.integer({ min: 0, max: 100 }), (rows, a, b) => {
        const categories = ['ring', 'cross', 'bar', 'tee'];
        const labels = rows.map(([c], i) => (i < K ? [categories[i]!] : [categories[c]!]));
        const N = rows.length;
        const means = new Float32Array(N * 2);
        rows.forEach(([, r], n) => {
          means[n * 2] = r / 8;
          means[n * 2 + 1] = a * (r / 8) + b; // exact in float32 for these integers
        });
        const table = computeTuning({ channelMeans: means, stimuli: N, channels: 2, labels, categories });
        if (table.zeroVariance[0] === 1) return table.zeroVariance[1] === 1;
        let sum = 0;
        let squares = 0;
        for (let c = 0; c < K; c++) {
          const t = table.tuning[c]!;
          sum += t;
          squares += t * t;
          if (Math.abs(t - table.tuning[K + c]!) > 1e-9) return false;
        }
        const s = table.selectivity[0]!;
        return Math.abs(sum) < 1e-12 && Math.abs(squares - K) < 1e-12 && s >= 0 && s <= 1;
      }),
      { seed: 1999, numRuns: 300 },
    );
  });

  it('computeTuning(channel means with NaN) counts them and makes that channel NaN', () => {
    const means = layer([
      [1, 2, 3, 4],
      [1, Number.NaN, 3, 4],
    ]);
    const table = computeTuning({ channelMeans: means, stimuli: 4, channels: 2, labels: [['ring'], ['ring'], ['cross'], ['cross']], categories: ['ring', 'cross'] });
    expect(Array.from(table.nonFinite)).toEqual([0, 1]);
    expect(table.tuning[2]).toBeNaN();
    expect(table.preferred[1]).toBe(-1);
    expect(table.selectivity[1]).toBeNaN();
    expect(table.zeroVariance[1]).toBe(0);
    expect(Array.from(table.tuning.subarray(0, 2))).toEqual([-1, 1]);
  });

  it('computeTuning(input) names an empty category and rejects bad shapes', () => {
    const base = { channelMeans: layer([CHANNEL_0]), stimuli: 6, channels: 1, labels: LABELS };
    expect(() => computeTuning({ ...base, categories: ['ring', 'star'] })).toThrow(UsageError);
    expect(() => computeTuning({ ...base, categories: ['ring', 'star'] })).toThrow(/category "star" has no stimuli/);
    expect(() => computeTuning({ ...base, categories: ['ring'] })).toThrow(/at least 2 categories/);
    expect(() => computeTuning({ ...base, categories: ['ring', 'ring'] })).toThrow(/listed twice/);
    expect(() => computeTuning({ ...base, stimuli: 5, categories: CATEGORIES })).toThrow(/6 values but stimuli × channels = 5 × 1 = 5/);
    expect(() => computeTuning({ ...base, labels: LABELS.slice(1), categories: CATEGORIES })).toThrow(/labels for 5 stimuli/);
  });
});

describe('tuningColumn', () => {
  it('tuningColumn(table, category) returns t_k for one category and names unknown ones', () => {
    const table = computeTuning({ channelMeans: layer([CHANNEL_0, CHANNEL_1, CHANNEL_2]), stimuli: 6, channels: 3, labels: LABELS, categories: CATEGORIES });
    const bar = tuningColumn(table, 'bar');
    expect(bar.length).toBe(3);
    expect(bar[0]).toBe(table.tuning[2]);
    expect(bar[1]).toBe(0);
    expect(bar[2]).toBe(table.tuning[8]);
    expect(() => tuningColumn(table, 'bars')).toThrow(/category "bars" is not in the tuning table.*closest: "bar"/);
  });
});
