/**
 * Empirical ROC curve: the trapezoidal area under its points equals the ROC area by pair counting with
 * ties counted half (Hanley & McNeil 1982; `rocAuc`), on random scores with many ties (exact property);
 * points run from (0, 0) to (1, 1) and never decrease.
 */
import { describe, expect, it } from 'vitest';
import { rocCurve, rocCurveArea } from '../../src/stats/roc-curve.js';
import { rocAuc } from '../../src/stats/roc.js';
import { createRandom } from '../../src/random.js';

describe('rocCurve', () => {
  it('rocCurve: trapezoidal area equals rocAuc (ties half) on 50 random score sets with ties', () => {
    const random = createRandom(11);
    for (let trial = 0; trial < 50; trial++) {
      const n = 20 + trial;
      const scores = Float64Array.from({ length: n }, () => Math.round(random.uniform() * 8) / 2);
      const signal = Uint8Array.from({ length: n }, (_, i) => (i % 3 === 0 || random.uniform() < 0.3 ? 1 : 0));
      const points = rocCurve(scores, signal);
      expect(points[0]).toEqual({ falseAlarmRate: 0, hitRate: 0 });
      expect(points[points.length - 1]).toEqual({ falseAlarmRate: 1, hitRate: 1 });
      for (let i = 1; i < points.length; i++) {
        expect(points[i]!.falseAlarmRate).toBeGreaterThanOrEqual(points[i - 1]!.falseAlarmRate);
        expect(points[i]!.hitRate).toBeGreaterThanOrEqual(points[i - 1]!.hitRate);
      }
      expect(rocCurveArea(points)).toBeCloseTo(rocAuc(scores, signal), 12);
    }
  });

  it('rocCurve: one class empty gives the chance diagonal; NaN scores are left out', () => {
    expect(rocCurve([1, 2], Uint8Array.of(1, 1))).toEqual([{ falseAlarmRate: 0, hitRate: 0 }, { falseAlarmRate: 1, hitRate: 1 }]);
    const points = rocCurve([3, Number.NaN, 1], Uint8Array.of(1, 0, 0));
    expect(rocCurveArea(points)).toBe(1);
  });
});
