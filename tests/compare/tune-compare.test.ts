import { describe, expect, it } from 'vitest';
import { compareTables } from '../../src/compare/compare-tables.js';
import type { SensitivityTableBlock, TuningTableBlock } from '../../src/snapshot/tables.js';

// Pearson's r and Spearman's ρ themselves are checked against Anscombe's quartet and a worked example
// in tests/stats/correlation.test.ts; here the checks are what compareTables feeds them.

/** A tuning block from per-category columns (values t[c][k]). */
function tuning(layer: string, depth: number, categories: string[], columns: number[][]): TuningTableBlock {
  const C = columns[0]!.length;
  const K = categories.length;
  const t = new Float64Array(C * K);
  for (let c = 0; c < K; c++) for (let k = 0; k < C; k++) t[k * K + c] = columns[c]![k]!;
  return {
    layer, depth, op: 'Relu', channels: C, categories, mean: new Float64Array(C * K), sem: new Float64Array(C * K), count: new Int32Array(K).fill(1),
    tuning: t, preferred: new Int32Array(C), selectivity: new Float64Array(C), zeroVariance: new Uint8Array(C),
  };
}

function sensitivity(layer: string, categories: string[], columns: number[][]): SensitivityTableBlock {
  const C = columns[0]!.length;
  const K = categories.length;
  const s = new Float64Array(C * K);
  for (let c = 0; c < K; c++) for (let k = 0; k < C; k++) s[k * K + c] = columns[c]![k]!;
  return { layer, channels: C, categories, sensitivity: s, fdError: new Float64Array(C * K), kind: 'gain', step: 0.01, count: new Int32Array(K).fill(4) };
}

const T_A = [1, 1, -1, -1]; // with two categories every z-score is ±1 and t_b = −t_a
const T_B = [-1, -1, 1, 1];

describe('compareTables', () => {
  it('compareTables(hand-made tables) gives the hand-computed per-category and pooled correlations', () => {
    // Raw sensitivities a = (3, 1, 2, 0), b = (1, 1, 0, 2), z-scored per channel across the two categories:
    // a' = (1, 0, 1, −1), b' = −a' (channel 1 has zero variance → 0).
    // Pearson(t_a, a'): centred a' = (0.75, −0.25, 0.75, −1.25); Σ t·a' = 1, Σt² = 4, Σa'² = 2.75 → r = 1/√11.
    // Spearman: ranks of t_a (3.5, 3.5, 1.5, 1.5), of a' (3.5, 2, 3.5, 1) → ρ = 1/√18.
    // Pooled over 8 pairs (both means 0): Σ t·s = 2, Σt² = 8, Σs² = 6 → r = 2/√48.
    const result = compareTables([tuning('relu3', 3, ['a', 'b'], [T_A, T_B])], [sensitivity('relu3', ['a', 'b'], [[3, 1, 2, 0], [1, 1, 0, 2]])]);
    expect(result.sensitivityScale).toBe('normalised');
    expect(result.categories).toEqual(['a', 'b']);
    const layer = result.layers[0]!;
    expect(layer.byCategory.map((c) => c.category)).toEqual(['a', 'b']);
    for (const c of layer.byCategory) {
      expect(c.n).toBe(4);
      expect(c.pearson).toBeCloseTo(1 / Math.sqrt(11), 12);
      expect(c.spearman).toBeCloseTo(1 / Math.sqrt(18), 12);
    }
    expect(layer.pooled.n).toBe(8);
    expect(layer.pooled.pearson).toBeCloseTo(2 / Math.sqrt(48), 12);
  });

  it('compareTables gives r = 1 for sensitivities that are an increasing affine map of tuning and −1 for a decreasing one; the depth trend is their line', () => {
    const t = tuning('deep', 5, ['a', 'b'], [T_A, T_B]);
    const early = tuning('early', 2, ['a', 'b'], [T_A, T_B]);
    const result = compareTables(
      [early, t],
      [sensitivity('deep', ['a', 'b'], [T_A.map((v) => 2 * v + 1), T_B.map((v) => 2 * v + 1)]), sensitivity('early', ['a', 'b'], [T_A.map((v) => -v), T_B.map((v) => -v)])],
    );
    // layers come back in the tuning table's order, whatever the sensitivity table's order
    expect(result.layers.map((l) => l.layer)).toEqual(['early', 'deep']);
    expect(result.layers[0]!.pooled.pearson).toBeCloseTo(-1, 12);
    expect(result.layers[1]!.pooled.pearson).toBeCloseTo(1, 12);
    expect(result.layers[1]!.pooled.spearman).toBeCloseTo(1, 12);
    // line through (2, −1) and (5, 1): slope 2/3, intercept −7/3
    expect(result.depthTrend.slope).toBeCloseTo(2 / 3, 12);
    expect(result.depthTrend.intercept).toBeCloseTo(-7 / 3, 12);
  });

  it('compareTables with one shared category correlates the raw sensitivities and reports unmatched sites', () => {
    // Pearson((1, 1, −1, −1), (3, 1, 2, 0)): centred (1.5, −0.5, 0.5, −1.5), Σ = 2, Σs² = 5 → r = 2/√20.
    const result = compareTables([tuning('relu3', 3, ['a', 'b'], [T_A, T_B])], [sensitivity('relu3', ['a'], [[3, 1, 2, 0]]), sensitivity('elsewhere', ['a'], [[1, 2, 3, 4]])]);
    expect(result.sensitivityScale).toBe('raw');
    expect(result.categories).toEqual(['a']);
    expect(result.layers[0]!.byCategory[0]!.pearson).toBeCloseTo(2 / Math.sqrt(20), 12);
    expect(result.unmatched).toEqual(['elsewhere']);
    expect(result.depthTrend.slope).toBeNaN(); // one layer: no line
  });

  it('compareTables refuses tables without a shared layer or category, and a layer with different channel counts', () => {
    const t = tuning('relu3', 3, ['a', 'b'], [T_A, T_B]);
    expect(() => compareTables([t], [sensitivity('relu4', ['a', 'b'], [T_A, T_B])])).toThrow(/sites \("relu4"\) are not layers of the tuning table \(1 layer; closest: "relu3"\)/);
    expect(() => compareTables([t], [sensitivity('relu3', ['x', 'y'], [T_A, T_B])])).toThrow(/share no category \(2 in the tuning table: a, b; 2 in the sensitivity table: x, y\)/);
    // a readout of 1000 units: the message names a few and counts the rest (one short line, not thousands of characters)
    const many = Array.from({ length: 1000 }, (_, i) => `class${i}`);
    let message = '';
    try {
      compareTables([t], [sensitivity('relu3', many, many.map(() => T_A))]);
    } catch (error) {
      message = (error as Error).message;
    }
    expect(message).toContain('1000 in the sensitivity table: class0, class1, class2, class3, … (1000 in all)');
    expect(message.length).toBeLessThan(300);
    expect(() => compareTables([t], [sensitivity('relu3', ['a', 'b'], [[1, 2], [2, 1]])])).toThrow(/4 channels in the tuning table but 2 in the sensitivity table/);
  });
});
