import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { balancedWeights, crossValidateLogistic, featureScaling, fitLogistic, predictLogits, sigmoid, standardiseRows, stratifiedFolds } from '../../src/stats/logistic-regression.js';

interface Fit { coef: number[]; intercept: number; probability: number[] }
interface Case { name: string; n: number; d: number; x: number[]; y: number[]; folds: number[]; fixed: Array<Fit & { C: number; balanced: boolean }>; cv: Array<Fit & { balanced: boolean; Cs: number[]; losses: number[]; C: number }> }
// scikit-learn 1.2.1 (Debian python3-sklearn) reference fits; made by fixtures/make_logistic_fixture.py
const fixture = JSON.parse(readFileSync(join(__dirname, 'fixtures', 'logistic.json'), 'utf8')) as { cases: Case[] };

/** |a − b| ≤ 1e-4 · |b|, with a floor of 1e-4 of the largest reference value for entries near zero. */
function expectRelative(actual: ArrayLike<number>, expected: readonly number[], label: string): void {
  const top = Math.max(...expected.map(Math.abs));
  expected.forEach((e, j) => expect(Math.abs(actual[j]! - e), `${label}[${j}]: ${actual[j]} vs ${e}`).toBeLessThanOrEqual(1e-4 * Math.max(Math.abs(e), 1e-2 * top)));
}

describe('fitLogistic', () => {
  for (const c of fixture.cases) {
    it(`fitLogistic matches scikit-learn's LogisticRegression at C = 0.01, 1, 100, with and without balanced classes (${c.name}; 1e-4 relative)`, () => {
      const x = Float64Array.from(c.x);
      const y = Uint8Array.from(c.y);
      const all = Int32Array.from({ length: c.n }, (_, i) => i);
      const xs = standardiseRows(x, c.d, all, featureScaling(x, c.n, c.d));
      for (const ref of c.fixed) {
        const model = fitLogistic(xs, c.n, c.d, y, { C: ref.C, ...(ref.balanced ? { sampleWeight: balancedWeights(y) } : {}) });
        const label = `${c.name} C=${ref.C} balanced=${ref.balanced}`;
        expect(model.converged, label).toBe(true);
        expectRelative(model.weights, ref.coef, `${label} coef`);
        expectRelative([model.intercept], [ref.intercept], `${label} intercept`);
        expectRelative(Array.from(predictLogits(xs, c.n, c.d, model), sigmoid), ref.probability, `${label} probability`);
      }
    });
  }

  it('fitLogistic refuses one class, a bad C and mismatched sizes', () => {
    const x = new Float64Array(6);
    expect(() => fitLogistic(x, 3, 2, Uint8Array.from([1, 1, 1]), { C: 1 })).toThrow(/both classes/);
    expect(() => fitLogistic(x, 3, 2, Uint8Array.from([1, 0, 1]), { C: 0 })).toThrow(/C must be/);
    expect(() => fitLogistic(x, 2, 2, Uint8Array.from([1, 0, 1]), { C: 1 })).toThrow(/n=2/);
  });

  it('fitLogistic gives ∇f = 0 at its optimum: w = −C·Σ s_i (p_i − y_i) x_i and Σ s_i (p_i − y_i) = 0 (first-order condition, exact property)', () => {
    const c = fixture.cases[1]!;
    const x = Float64Array.from(c.x);
    const y = Uint8Array.from(c.y);
    const s = balancedWeights(y);
    const m = fitLogistic(x, c.n, c.d, y, { C: 0.5, sampleWeight: s });
    const z = predictLogits(x, c.n, c.d, m);
    let gb = 0;
    const gw = new Float64Array(c.d);
    for (let i = 0; i < c.n; i++) {
      const e = s[i]! * (sigmoid(z[i]!) - y[i]!);
      gb += e;
      for (let j = 0; j < c.d; j++) gw[j] += 0.5 * e * x[i * c.d + j]!;
    }
    expect(Math.abs(gb)).toBeLessThan(1e-7);
    for (let j = 0; j < c.d; j++) expect(Math.abs(m.weights[j]! + gw[j]!)).toBeLessThan(1e-6 * Math.max(1, Math.abs(m.weights[j]!)));
  });
});

describe('crossValidateLogistic', () => {
  for (const c of fixture.cases) {
    it(`crossValidateLogistic chooses the C GridSearchCV chooses (neg_log_loss, the same folds) and refits as scikit-learn does (${c.name})`, () => {
      const x = Float64Array.from(c.x);
      const y = Uint8Array.from(c.y);
      for (const ref of c.cv) {
        const result = crossValidateLogistic(x, c.n, c.d, y, { Cs: ref.Cs, folds: Int32Array.from(c.folds), balanced: ref.balanced });
        const label = `${c.name} balanced=${ref.balanced}`;
        expectRelative(result.losses, ref.losses, `${label} losses`);
        expect(result.C, label).toBe(ref.C);
        expectRelative(result.model.weights, ref.coef, `${label} coef`);
        expectRelative([result.model.intercept], [ref.intercept], `${label} intercept`);
        const all = Int32Array.from({ length: c.n }, (_, i) => i);
        const xs = standardiseRows(x, c.d, all, result.scaling);
        expectRelative(Array.from(predictLogits(xs, c.n, c.d, result.model), sigmoid), ref.probability, `${label} probability`);
      }
    });
  }
});

describe('stratifiedFolds', () => {
  it('stratifiedFolds deals each class evenly over k folds, depends only on the seed, and refuses a class smaller than k', () => {
    const y = Uint8Array.from({ length: 23 }, (_, i) => (i % 3 === 0 ? 1 : 0)); // 8 positives, 15 negatives
    const folds = stratifiedFolds(y, 4, 7);
    for (let f = 0; f < 4; f++) {
      const pos = y.filter((v, i) => v === 1 && folds[i] === f).length;
      const neg = y.filter((v, i) => v === 0 && folds[i] === f).length;
      expect(pos).toBe(2);
      expect(neg === 3 || neg === 4).toBe(true);
    }
    expect(Array.from(stratifiedFolds(y, 4, 7))).toEqual(Array.from(folds));
    expect(Array.from(stratifiedFolds(y, 4, 8))).not.toEqual(Array.from(folds));
    expect(() => stratifiedFolds(y, 9, 1)).toThrow(/8 positive samples for 9 folds/);
  });
});

describe('featureScaling', () => {
  it('featureScaling uses the population sd and scale 1 for a constant feature (as StandardScaler does), counting it', () => {
    const x = Float64Array.from([1, 5, 3, 5, 5, 5]); // [3, 2]: feature 0 = 1,3,5; feature 1 constant 5
    const s = featureScaling(x, 3, 2);
    expect(s.mean[0]).toBeCloseTo(3, 14);
    expect(s.scale[0]).toBeCloseTo(Math.sqrt(8 / 3), 14);
    expect(s.scale[1]).toBe(1);
    expect(s.constant).toBe(1);
  });
});
