import stdlibQuantile from '@stdlib/stats-base-dists-normal-quantile';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { accuracyMaximisingThreshold, detectFromScores, detectionStats } from '../../src/stats/signal-detection.js';
import { UsageError } from '../../src/errors.js';

const z = (p: number): number => stdlibQuantile(p, 0, 1);

describe('detectionStats', () => {
  it('detectionStats(H = 0.84, F = 0.16) gives d′ = 1.98892 and c = 0', () => {
    // Standard normal table (Abramowitz & Stegun 1964, Table 26.1): z(0.84) = 0.994458, so d′ = 2·0.994458.
    const stats = detectionStats({ hits: 84, signalTrials: 100, falseAlarms: 16, noiseTrials: 100 });
    expect(stats.corrected).toBe(false);
    expect(stats.hitRate).toBe(0.84);
    expect(stats.falseAlarmRate).toBe(0.16);
    expect(Math.abs(stats.dPrime - 1.98892)).toBeLessThan(5e-6);
    expect(Math.abs(stats.criterion)).toBeLessThan(1e-12);
    expect(stats.accuracy).toBe((84 + 84) / 200);
  });

  it('detectionStats(0 of 10 hits) applies the log-linear correction to both rates', () => {
    // Hautus (1995), BRMIC 27:46: H = (0 + 0.5)/(10 + 1) = 1/22, F = (3 + 0.5)/(10 + 1) = 7/22 (hand-computed);
    // z from @stdlib's normal quantile (an independent implementation).
    const stats = detectionStats({ hits: 0, signalTrials: 10, falseAlarms: 3, noiseTrials: 10 });
    expect(stats.corrected).toBe(true);
    expect(stats.hitRate).toBe(0);
    expect(stats.falseAlarmRate).toBe(0.3);
    expect(stats.adjustedHitRate).toBeCloseTo(1 / 22, 15);
    expect(stats.adjustedFalseAlarmRate).toBeCloseTo(7 / 22, 15);
    expect(Math.abs(stats.dPrime - (z(1 / 22) - z(7 / 22)))).toBeLessThan(1e-12);
    expect(Math.abs(stats.criterion + (z(1 / 22) + z(7 / 22)) / 2)).toBeLessThan(1e-12);
    // Accuracy stays on the raw counts: (0 hits + 7 correct rejections) / 20.
    expect(stats.accuracy).toBe(7 / 20);
  });

  it('detectionStats(perfect table) is finite under auto and infinite under none', () => {
    // Hand-computed: H = 10.5/11, F = 0.5/11, so d′ = z(10.5/11) − z(0.5/11) = 2·z(10.5/11) by symmetry, c = 0.
    const counts = { hits: 10, signalTrials: 10, falseAlarms: 0, noiseTrials: 10 };
    const auto = detectionStats(counts);
    expect(auto.corrected).toBe(true);
    expect(Math.abs(auto.dPrime - 2 * z(10.5 / 11))).toBeLessThan(1e-12);
    expect(Math.abs(auto.criterion)).toBeLessThan(1e-12);
    expect(auto.accuracy).toBe(1);
    const none = detectionStats(counts, { correction: 'none' });
    expect(none.corrected).toBe(false);
    expect(none.dPrime).toBe(Number.POSITIVE_INFINITY);
    expect(none.criterion).toBeNaN(); // −(∞ + −∞)/2
  });

  it('detectionStats(counts, { correction: "always" }) corrects a table without extreme rates', () => {
    const stats = detectionStats({ hits: 6, signalTrials: 8, falseAlarms: 2, noiseTrials: 8 }, { correction: 'always' });
    expect(stats.corrected).toBe(true);
    expect(stats.adjustedHitRate).toBe(6.5 / 9);
    expect(Math.abs(stats.dPrime - (z(6.5 / 9) - z(2.5 / 9)))).toBeLessThan(1e-12);
    const auto = detectionStats({ hits: 6, signalTrials: 8, falseAlarms: 2, noiseTrials: 8 });
    expect(auto.corrected).toBe(false);
    expect(Math.abs(auto.dPrime - (z(0.75) - z(0.25)))).toBeLessThan(1e-12);
  });

  it('detectionStats(counts) obeys the mirror symmetries of d′ and c', () => {
    // Exact properties (z(1 − p) = −z(p)): swapping hit rate with 1 − false-alarm rate keeps d′ and flips c;
    // swapping H and F flips d′ and keeps c; relabelling yes ↔ no flips both. The maps act on counts, and the
    // log-linear correction commutes with them, so they hold with and without correction.
    const table = fc
      .record({ signalTrials: fc.integer({ min: 1, max: 60 }), noiseTrials: fc.integer({ min: 1, max: 60 }), h: fc.double({ min: 0, max: 1, noNaN: true }), f: fc.double({ min: 0, max: 1, noNaN: true }) })
      .map(({ signalTrials, noiseTrials, h, f }) => ({
        hits: Math.round(h * signalTrials),
        signalTrials,
        falseAlarms: Math.round(f * noiseTrials),
        noiseTrials,
      }));
    fc.assert(
      fc.property(table, (t) => {
        const s = detectionStats(t);
        const mirrored = detectionStats({ hits: t.noiseTrials - t.falseAlarms, signalTrials: t.noiseTrials, falseAlarms: t.signalTrials - t.hits, noiseTrials: t.signalTrials });
        const swapped = detectionStats({ hits: t.falseAlarms, signalTrials: t.noiseTrials, falseAlarms: t.hits, noiseTrials: t.signalTrials });
        const relabelled = detectionStats({ hits: t.signalTrials - t.hits, signalTrials: t.signalTrials, falseAlarms: t.noiseTrials - t.falseAlarms, noiseTrials: t.noiseTrials });
        const close = (a: number, b: number): boolean => Math.abs(a - b) <= 1e-12 * (1 + Math.abs(a));
        return (
          close(mirrored.dPrime, s.dPrime) &&
          close(mirrored.criterion, -s.criterion) &&
          close(swapped.dPrime, -s.dPrime) &&
          close(swapped.criterion, s.criterion) &&
          close(relabelled.dPrime, -s.dPrime) &&
          close(relabelled.criterion, -s.criterion)
        );
      }),
      { seed: 1995, numRuns: 500 },
    );
  });

  it('detectionStats(counts) rejects zero trials, impossible and non-integer counts', () => {
    expect(() => detectionStats({ hits: 0, signalTrials: 0, falseAlarms: 1, noiseTrials: 5 })).toThrow(UsageError);
    expect(() => detectionStats({ hits: 0, signalTrials: 0, falseAlarms: 1, noiseTrials: 5 })).toThrow(/signalTrials = 0/);
    expect(() => detectionStats({ hits: 1, signalTrials: 5, falseAlarms: 0, noiseTrials: 0 })).toThrow(/noiseTrials = 0/);
    expect(() => detectionStats({ hits: 6, signalTrials: 5, falseAlarms: 0, noiseTrials: 5 })).toThrow(/hits = 6 > signalTrials = 5/);
    expect(() => detectionStats({ hits: -1, signalTrials: 5, falseAlarms: 0, noiseTrials: 5 })).toThrow(/hits = -1/);
    expect(() => detectionStats({ hits: 1.5, signalTrials: 5, falseAlarms: 0, noiseTrials: 5 })).toThrow(UsageError);
  });
});

describe('detectFromScores', () => {
  it('detectFromScores(scores, isSignal, 0.5) counts "yes" as score > threshold and reports NaN scores', () => {
    // Hand-computed: signal scores 0.9, 0.7, 0.4 → 2 hits of 3; noise 0.2 → 0 of 1 (NaN excluded, counted);
    // F = 0 triggers the log-linear correction.
    const scores = Float64Array.of(0.9, 0.2, 0.7, 0.4, Number.NaN);
    const isSignal = Uint8Array.of(1, 0, 1, 1, 0);
    const result = detectFromScores(scores, isSignal, 0.5);
    expect(result.counts).toEqual({ hits: 2, signalTrials: 3, falseAlarms: 0, noiseTrials: 1 });
    expect(result.nonFiniteScores).toBe(1);
    expect(result.corrected).toBe(true);
    expect(result.accuracy).toBe(3 / 4);
    // A score equal to the threshold is a "no".
    expect(detectFromScores(Float32Array.of(0.5, 0.5), Uint8Array.of(1, 0), 0.5).counts.hits).toBe(0);
  });

  it('detectFromScores(scores, isSignal, t) rejects mismatched lengths and a NaN threshold', () => {
    expect(() => detectFromScores(Float64Array.of(1, 2), Uint8Array.of(1), 0)).toThrow(/2 entries but isSignal has 1/);
    expect(() => detectFromScores(Float64Array.of(1, 2), Uint8Array.of(1, 0), Number.NaN)).toThrow(UsageError);
  });
});

describe('accuracyMaximisingThreshold', () => {
  it('accuracyMaximisingThreshold(scores, isSignal) picks the best midpoint, breaking ties toward 0', () => {
    // Hand-computed sweep over candidates −∞, −1.5, −0.25, 0.75, 2, +∞: correct counts 2, 3, 4, 3, 4, 3;
    // the tie between −0.25 and 2 goes to −0.25 (closer to 0).
    const choice = accuracyMaximisingThreshold(Float64Array.of(-2, -1, 0.5, 1, 3), Uint8Array.of(0, 0, 1, 0, 1));
    expect(choice.threshold).toBe(-0.25);
    expect(choice.accuracy).toBe(0.8);
    expect(choice.nonFiniteScores).toBe(0);
  });

  it('accuracyMaximisingThreshold(scores, isSignal) separates neighbouring doubles', () => {
    const low = 1;
    const high = 1 + 2 ** -52;
    const choice = accuracyMaximisingThreshold(Float64Array.of(low, high), Uint8Array.of(0, 1));
    expect(choice.accuracy).toBe(1);
    expect(detectFromScores(Float64Array.of(low, high), Uint8Array.of(0, 1), choice.threshold).accuracy).toBe(1);
  });

  it('accuracyMaximisingThreshold(equal scores) falls back to −Infinity or +Infinity', () => {
    expect(accuracyMaximisingThreshold(Float64Array.of(2, 2, 2), Uint8Array.of(1, 1, 0)).threshold).toBe(Number.NEGATIVE_INFINITY);
    expect(accuracyMaximisingThreshold(Float64Array.of(2, 2, 2), Uint8Array.of(0, 0, 1)).threshold).toBe(Number.POSITIVE_INFINITY);
    expect(() => accuracyMaximisingThreshold(Float64Array.of(Number.NaN), Uint8Array.of(1))).toThrow(/none of the 1/);
  });

  it('accuracyMaximisingThreshold(scores, isSignal) equals a brute-force search over all thresholds', () => {
    // Independent check: try every candidate (±∞ and each midpoint) by direct counting; the chosen threshold
    // must reach the maximum accuracy and be the closest to 0 among the maximisers (lower one on a tie).
    const trial = fc.array(fc.record({ score: fc.integer({ min: -6, max: 6 }), signal: fc.boolean() }), { minLength: 1, maxLength: 30 });
    fc.assert(
      fc.property(trial, (trials) => {
        const scores = Float64Array.from(trials, (t) => t.score / 2);
        const isSignal = Uint8Array.from(trials, (t) => (t.signal ? 1 : 0));
        const distinct = [...new Set(scores)].sort((a, b) => a - b);
        const candidates = [Number.NEGATIVE_INFINITY, ...distinct.slice(1).map((v, i) => (distinct[i]! + v) / 2), Number.POSITIVE_INFINITY];
        const accuracyOf = (t: number): number => {
          let correct = 0;
          scores.forEach((s, i) => {
            if ((s > t) === (isSignal[i] === 1)) correct++;
          });
          return correct / scores.length;
        };
        const best = Math.max(...candidates.map(accuracyOf));
        const winners = candidates.filter((t) => accuracyOf(t) === best);
        const closest = Math.min(...winners.map(Math.abs));
        const expected = winners.find((t) => Math.abs(t) === closest)!;
        const choice = accuracyMaximisingThreshold(scores, isSignal);
        return choice.accuracy === best && choice.threshold === expected;
      }),
      { seed: 7, numRuns: 500 },
    );
  });
});
