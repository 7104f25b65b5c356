import { describe, expect, it } from 'vitest';
import { fitGainCeiling, projectWeightedL1 } from '../../src/analysis/gain-ceiling.js';

// Two channels read out linearly, s = g0·x0 + g1·x1 (so the Jacobian ∂s/∂g_k = x_k is exact).
// Signal stimuli (1, 0) and (1, 2), noise stimuli (0, 0) and (0, 2). Worked by hand (exact property):
// the only pair out of order is signal (1, 0) vs noise (0, 2), in order iff g0 > 2·g1, i.e.
// d0 − 2·d1 > 1 with d = g − 1. Under |d0| + |d1| ≤ 2·budget the largest d0 − 2·d1 is 4·budget (all
// of the budget spent lowering g1): the ROC area is 3/4 below budget 1/4, 7/8 at it, 1 above it.
const x = [
  [1, 0],
  [1, 2],
  [0, 0],
  [0, 2],
];
const problem = {
  scores: x.map(([a, b]) => a! + b!),
  jacobian: Float64Array.from(x.flat()),
  channels: 2,
  isSignal: Uint8Array.from([1, 1, 0, 0]),
  weights: [1, 1],
};

describe('fitGainCeiling', () => {
  it('fitGainCeiling reaches ROC area 1 above the hand-computed budget 1/4, by lowering the distractor channel', () => {
    const fit = fitGainCeiling({ ...problem, budget: 0.3 });
    expect(fit.baseAuc).toBe(0.75);
    expect(fit.linearAuc).toBe(1);
    expect(fit.gain[0]! - 2 * fit.gain[1]!).toBeGreaterThan(0);
    expect(fit.gain[1]!).toBeLessThan(1); // the size-efficient direction: d1 buys 2 units of margin per unit, d0 one
    expect(fit.size).toBeLessThanOrEqual(0.3 + 1e-12);
  });

  it('fitGainCeiling cannot exceed 3/4 below the budget 1/4 (exact bound worked by hand)', () => {
    const fit = fitGainCeiling({ ...problem, budget: 0.2 });
    expect(fit.linearAuc).toBe(0.75);
    expect(fit.size).toBeLessThanOrEqual(0.2 + 1e-12);
  });

  it('fitGainCeiling with the stimuli repeated as validation copies reaches the same hand-computed optimum on them', () => {
    // each of the four stimuli twice; the second copies are held back from the gradient and choose the step
    const twice = {
      scores: [...problem.scores, ...problem.scores],
      jacobian: Float64Array.from([...x.flat(), ...x.flat()]),
      channels: 2,
      isSignal: Uint8Array.from([1, 1, 0, 0, 1, 1, 0, 0]),
      weights: [1, 1],
      validation: Uint8Array.from([0, 0, 0, 0, 1, 1, 1, 1]),
    };
    const fit = fitGainCeiling({ ...twice, budget: 0.3 });
    expect(fit.validationBaseAuc).toBe(0.75);
    expect(fit.validationAuc).toBe(1);
    expect(fit.linearAuc).toBe(1);
    expect(() => fitGainCeiling({ ...twice, validation: Uint8Array.from([0, 0, 0, 0, 1, 1, 1]), budget: 0.3 })).toThrow(/validation mask/);
  });

  it('fitGainCeiling with budget 0 returns gain 1 and the baseline ROC area', () => {
    const fit = fitGainCeiling({ ...problem, budget: 0 });
    expect(Array.from(fit.gain)).toEqual([1, 1]);
    expect(fit.linearAuc).toBe(fit.baseAuc);
  });

  it('fitGainCeiling refuses mismatched lengths, a negative budget and an empty class', () => {
    expect(() => fitGainCeiling({ ...problem, channels: 3, budget: 0.1 })).toThrow(/do not fit 3 channels/);
    expect(() => fitGainCeiling({ ...problem, budget: -1 })).toThrow(/budget/);
    expect(() => fitGainCeiling({ ...problem, isSignal: Uint8Array.from([1, 1, 1, 1]), budget: 0.1 })).toThrow(/both classes/);
  });
});

describe('projectWeightedL1', () => {
  it('projectWeightedL1 is the weighted soft threshold (worked by hand: λ = 2 gives (1, 0, 0))', () => {
    // v = (3, −1, 0.5), w = (1, 2, 1), radius 1: with all three active λ would be 0.75 (drops the third),
    // with two 0.8 (drops the second), with one 3 − λ = 1, λ = 2; then |−1| − 2·2 < 0 and 0.5 − 2 < 0.
    const d = Float64Array.from([3, -1, 0.5]);
    projectWeightedL1(d, [1, 2, 1], 1);
    expect(d[0]).toBeCloseTo(1, 12);
    expect(d[1]).toBe(0);
    expect(d[2]).toBe(0);
  });

  it('projectWeightedL1 keeps a point inside the ball, clips gains at 0 and leaves weightless channels at gain 1', () => {
    const inside = Float64Array.from([0.1, -0.2]);
    projectWeightedL1(inside, [1, 1], 1);
    expect(Array.from(inside)).toEqual([0.1, -0.2]);
    const clipped = Float64Array.from([-3, 0.5]);
    projectWeightedL1(clipped, [1, 0], 5);
    expect(Array.from(clipped)).toEqual([-1, 0]);
  });
});
