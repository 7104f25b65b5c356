import { describe, expect, it } from 'vitest';
import { rocAuc } from '../../src/stats/roc.js';
import { detectFromScores } from '../../src/stats/signal-detection.js';
import { createRandom } from '../../src/random.js';
import { meanDraws, percentileInterval, readoutDraws, sweepResampling } from '../../src/replay/sweep-intervals.js';

describe('readoutDraws', () => {
  it('readoutDraws equals rocAuc and d′ of each resample written out trial by trial (exact property of multiplicities)', () => {
    const random = createRandom(5);
    const n = 40;
    const scores = Float64Array.from({ length: n }, (_, i) => random.normal() + (i % 3 === 0 ? 1 : 0));
    const signal = Uint8Array.from({ length: n }, (_, i) => (i % 3 === 0 ? 1 : 0));
    const resampling = sweepResampling(n, 25, 'test');
    const draws = readoutDraws(scores, signal, 0.3, resampling);
    resampling.forEach((weights, r) => {
      const s: number[] = [];
      const f: number[] = [];
      weights.forEach((w, i) => {
        for (let k = 0; k < w; k++) {
          s.push(scores[i]!);
          f.push(signal[i]!);
        }
      });
      expect(s.length).toBe(n);
      expect(draws.auc[r]).toBeCloseTo(rocAuc(s, Uint8Array.from(f)), 12);
      expect(draws.dPrime[r]).toBeCloseTo(detectFromScores(Float64Array.from(s), Uint8Array.from(f), 0.3).dPrime, 12);
    });
    // the same seed gives the same resamples
    expect(sweepResampling(n, 25, 'test')).toEqual(resampling);
  });
});

describe('percentileInterval', () => {
  it('percentileInterval uses linear interpolation between order statistics (numpy\'s default percentile, common practice)', () => {
    const values = Array.from({ length: 41 }, (_, i) => i); // 0..40: the 2.5 % point is at rank 1, the 97.5 % at 39
    const [low, high] = percentileInterval(values)!;
    expect(low).toBeCloseTo(1, 12);
    expect(high).toBeCloseTo(39, 12);
    expect(percentileInterval([1, 2, 3])).toBeNull(); // too few draws for a 95 % interval
    expect(percentileInterval([...values, Number.NaN])![0]).toBeCloseTo(1, 12);
  });

  it('meanDraws averages resample by resample and refuses lists of different lengths', () => {
    expect(Array.from(meanDraws([[1, 2], [3, 6]])!)).toEqual([2, 4]);
    expect(meanDraws([[1], [1, 2]])).toBeNull();
    expect(meanDraws([undefined])).toBeNull();
  });
});
