import { describe, expect, it } from 'vitest';
import { aucStandardError, criterionShiftControl, hitRateAtFalseAlarm, hitRateRangeAtFalseAlarm, rocAuc, rocAucWeighted, rocOrder } from '../../src/stats/roc.js';
import { bootstrapInterval } from '../../src/stats/bootstrap.js';
import { UsageError } from '../../src/errors.js';
import { createRandom } from '../../src/random.js';
import { pairAuc } from '../helpers/pair-auc.js';

/** Expands rating-category counts (categories 1…K) into one score per trial. */
function ratings(counts: number[]): number[] {
  const out: number[] = [];
  counts.forEach((count, k) => {
    for (let i = 0; i < count; i++) out.push(k + 1);
  });
  return out;
}

function trials(noise: number[], signal: number[]): { scores: Float64Array; isSignal: Uint8Array } {
  const scores = Float64Array.from([...noise, ...signal]);
  const isSignal = new Uint8Array(scores.length);
  isSignal.fill(1, noise.length);
  return { scores, isSignal };
}

/** Random scores on a coarse grid (so ties occur), signal shifted up; a fixed seed. */
function randomTrials(seed: number, n: number): { scores: Float64Array; isSignal: Uint8Array } {
  const random = createRandom(seed);
  const scores = new Float64Array(n);
  const isSignal = new Uint8Array(n);
  for (let i = 0; i < n; i++) {
    isSignal[i] = random.uniform() < 0.4 ? 1 : 0;
    scores[i] = Math.round((random.normal() + isSignal[i]! * 0.8) * 4) / 4; // quarter steps: exact in binary
  }
  return { scores, isSignal };
}

// Hanley & McNeil (1982), Radiology 143:29, Table 1: 109 CT images rated 1 (definitely normal) … 5
// (definitely abnormal); 58 normal with 33/6/6/11/2 per category, 51 abnormal with 3/2/2/11/33.
// The counts and the published area ≈ 0.893 (SE ≈ 0.032) are quoted from memory; the area is recomputed
// here by hand with the Mann–Whitney formula, Σ over abnormal categories of count × (normals below + ½ normals equal):
//   cat 1: 3·(0 + 33/2) = 49.5;  cat 2: 2·(33 + 6/2) = 72;  cat 3: 2·(39 + 6/2) = 84;
//   cat 4: 11·(45 + 11/2) = 555.5;  cat 5: 33·(56 + 2/2) = 1881;  sum 2642, over 58·51 = 2958 pairs
//   → A = 2642/2958 = 0.893171…
// and the SE by their eq. 1–3: Q1 = A/(2−A) = 0.806964, Q2 = 2A²/(1+A) = 0.842771, A² = 0.797755,
//   SE² = [A(1−A) + 50(Q1−A²) + 57(Q2−A²)]/2958 = (0.095417 + 0.460471 + 2.565921)/2958 = 0.0010554 → SE = 0.03249.
const normalCt = ratings([33, 6, 6, 11, 2]);
const abnormalCt = ratings([3, 2, 2, 11, 33]);

describe('rocAuc', () => {
  it('rocAuc(Hanley & McNeil 1982 CT ratings) = 2642/2958 ≈ 0.893', () => {
    const { scores, isSignal } = trials(normalCt, abnormalCt);
    expect(rocAuc(scores, isSignal)).toBeCloseTo(2642 / 2958, 14);
    expect(Math.abs(rocAuc(scores, isSignal) - 0.893)).toBeLessThan(5e-4);
  });

  it('rocAuc(random tied scores) equals brute-force pair counting P(S>N) + ½P(S=N)', () => {
    // Exact property (definition of the Mann–Whitney area, Bamber 1975).
    for (const seed of [1, 2, 3, 4]) {
      const { scores, isSignal } = randomTrials(seed, 150);
      expect(rocAuc(scores, isSignal)).toBeCloseTo(pairAuc(scores, isSignal), 12);
    }
  });

  it('rocAuc(f(s)) = rocAuc(s) for strictly increasing f, and rocAuc(−s) = 1 − rocAuc(s)', () => {
    // Exact properties: the area depends on the order only; negating swaps wins and losses, ties stay ½.
    const { scores, isSignal } = randomTrials(7, 200);
    const auc = rocAuc(scores, isSignal);
    expect(auc).toBeGreaterThan(0.55);
    expect(rocAuc(scores.map((s) => Math.exp(s) * 3 - 2), isSignal)).toBe(auc);
    expect(rocAuc(scores.map((s) => s + 1.5), isSignal)).toBe(auc);
    expect(rocAuc(scores.map((s) => -s), isSignal)).toBeCloseTo(1 - auc, 14);
  });

  it('rocAuc(perfect separation) = 1, all equal = 0.5, one class empty = NaN, non-finite left out', () => {
    expect(rocAuc([0, 1, 2, 3], Uint8Array.from([0, 0, 1, 1]))).toBe(1);
    expect(rocAuc([0, 1, 2, 3], Uint8Array.from([1, 1, 0, 0]))).toBe(0);
    expect(rocAuc([5, 5, 5, 5], Uint8Array.from([0, 1, 0, 1]))).toBe(0.5);
    expect(rocAuc([1, 2], Uint8Array.from([1, 1]))).toBeNaN();
    expect(rocAuc([0, Number.NaN, 2, Number.POSITIVE_INFINITY], Uint8Array.from([0, 0, 1, 0]))).toBe(1);
    expect(() => rocAuc([1, 2], Uint8Array.from([1]))).toThrow(UsageError);
  });
});

describe('rocAucWeighted', () => {
  it('rocAucWeighted(multiplicities) = rocAuc of the sample with each trial repeated that often', () => {
    // Exact property: a bootstrap resample is the data with multiplicities; expand it and count pairs.
    const { scores, isSignal } = randomTrials(9, 80);
    const order = rocOrder(scores);
    const random = createRandom(99);
    for (let r = 0; r < 5; r++) {
      const weights = new Float64Array(scores.length);
      const picked: number[] = [];
      for (let i = 0; i < scores.length; i++) {
        const j = random.int(scores.length);
        weights[j]! += 1;
        picked.push(j);
      }
      const expanded = Float64Array.from(picked, (j) => scores[j]!);
      const flags = Uint8Array.from(picked, (j) => isSignal[j]!);
      expect(rocAucWeighted(scores, isSignal, weights, order)).toBeCloseTo(pairAuc(expanded, flags), 12);
    }
  });

  it('rocAucWeighted under the bootstrap: the interval holds the estimate and narrows about 1/√n (Hanley–McNeil SE as yardstick)', () => {
    // Percentile bootstrap (Efron & Tibshirani 1993) of the AUC; for large n its sd approaches the
    // Hanley & McNeil (1982) standard error, which scales as 1/√n at a fixed area (their eq. 1).
    const widths: number[] = [];
    for (const n of [100, 1600]) {
      const { scores, isSignal } = randomTrials(13 + n, n);
      const order = rocOrder(scores);
      const weights = new Float64Array(n);
      const interval = bootstrapInterval(n, (idx) => {
        weights.fill(0);
        for (let i = 0; i < idx.length; i++) weights[idx[i]!]! += 1;
        return rocAucWeighted(scores, isSignal, weights, order);
      }, { resamples: 400, seed: 5 });
      expect(interval.estimate).toBe(rocAuc(scores, isSignal));
      expect(interval.low).toBeLessThanOrEqual(interval.estimate);
      expect(interval.high).toBeGreaterThanOrEqual(interval.estimate);
      let signals = 0;
      for (let i = 0; i < n; i++) signals += isSignal[i]!;
      const se = aucStandardError(interval.estimate, signals, n - signals);
      expect(interval.sd / se).toBeGreaterThan(0.7);
      expect(interval.sd / se).toBeLessThan(1.4);
      widths.push(interval.high - interval.low);
    }
    // 16× the trials: about a quarter of the width (loose bounds for resampling noise)
    expect(widths[1]! / widths[0]!).toBeGreaterThan(0.15);
    expect(widths[1]! / widths[0]!).toBeLessThan(0.4);
  });
});

describe('aucStandardError', () => {
  it('aucStandardError(Hanley & McNeil 1982 CT example) ≈ 0.0325 (their eq. 1–3, recomputed by hand above)', () => {
    const se = aucStandardError(2642 / 2958, 51, 58);
    expect(Math.abs(se - 0.03249)).toBeLessThan(5e-5);
    expect(Math.abs(se - 0.032)).toBeLessThan(1e-3);
  });

  it('aucStandardError shrinks as 1/√n at a fixed area and rejects areas outside [0, 1]', () => {
    // Exact property of eq. 1: for large nS = nN = n, SE² ≈ (Q1 + Q2 − 2A²)/n.
    const ratio = aucStandardError(0.8, 400, 400) / aucStandardError(0.8, 1600, 1600);
    expect(ratio).toBeCloseTo(2, 2);
    expect(aucStandardError(Number.NaN, 3, 3)).toBeNaN();
    expect(() => aucStandardError(1.2, 3, 3)).toThrow(UsageError);
    expect(() => aucStandardError(0.7, 0, 3)).toThrow(UsageError);
  });
});

describe('hitRateAtFalseAlarm', () => {
  it('hitRateAtFalseAlarm(CT ratings) interpolates between the hand-computed ROC points', () => {
    // ROC points of "rating > t" from the counts above (hand-computed): t = 4: F = 2/58, H = 33/51;
    // t = 3: F = 13/58, H = 44/51; t = 2: F = 19/58, H = 46/51.
    const { scores, isSignal } = trials(normalCt, abnormalCt);
    expect(hitRateAtFalseAlarm(scores, isSignal, 2 / 58)).toBeCloseTo(33 / 51, 14);
    expect(hitRateAtFalseAlarm(scores, isSignal, 13 / 58)).toBeCloseTo(44 / 51, 14);
    const f = (2 / 58 + 13 / 58) / 2; // midway along the segment: H midway too
    expect(hitRateAtFalseAlarm(scores, isSignal, f)).toBeCloseTo((33 / 51 + 44 / 51) / 2, 14);
    expect(hitRateAtFalseAlarm(scores, isSignal, 1)).toBe(1);
    expect(hitRateAtFalseAlarm(scores, isSignal, 0)).toBe(0); // the first group (rating 5) holds noise too
  });

  it('hitRateAtFalseAlarm integrates to rocAuc (midpoint rule is exact on the piecewise-linear curve)', () => {
    // Exact property: the empirical ROC is linear on each interval [(k−1)/nN, k/nN] (its corners lie on
    // that grid), so the midpoint rule over the grid integrates it exactly; the midpoints avoid the
    // vertical steps, where the function returns the upper end.
    const { scores, isSignal } = randomTrials(11, 120);
    let noise = 0;
    for (let i = 0; i < isSignal.length; i++) if (isSignal[i] === 0) noise++;
    let area = 0;
    for (let k = 1; k <= noise; k++) area += hitRateAtFalseAlarm(scores, isSignal, (k - 0.5) / noise) / noise;
    expect(area).toBeCloseTo(rocAuc(scores, isSignal), 12);
  });

  it('hitRateAtFalseAlarm is unchanged by a constant shift of all scores and rejects rates outside [0, 1]', () => {
    const { scores, isSignal } = randomTrials(5, 100);
    for (const f of [0.05, 0.2, 0.5]) {
      expect(hitRateAtFalseAlarm(scores.map((s) => s + 2.25), isSignal, f)).toBe(hitRateAtFalseAlarm(scores, isSignal, f));
    }
    expect(hitRateAtFalseAlarm([0, 1, 2, 3], Uint8Array.from([0, 0, 1, 1]), 0)).toBe(1); // vertical start: upper end
    expect(() => hitRateAtFalseAlarm(scores, isSignal, 1.5)).toThrow(UsageError);
    expect(() => hitRateAtFalseAlarm(scores, isSignal, Number.NaN)).toThrow(UsageError);
  });
});

describe('hitRateRangeAtFalseAlarm', () => {
  // hand-drawn curve: scores high to low S(5) N(4) S(3) S(2) N(1) S(0) with 4 signal and 2 noise trials:
  // ROC points (0, 0) (0, ¼) (½, ¼) (½, ½) (½, ¾) (1, ¾) (1, 1) — vertical at F = ½ from ¼ to ¾
  const scores = [5, 4, 3, 2, 1, 0];
  const signal = Uint8Array.from([1, 0, 1, 1, 0, 1]);

  it('hitRateRangeAtFalseAlarm gives the bottom and top of a vertical stretch (hand-drawn ROC)', () => {
    expect(hitRateRangeAtFalseAlarm(scores, signal, 0.5)).toEqual({ low: 0.25, high: 0.75 });
    expect(hitRateRangeAtFalseAlarm(scores, signal, 0)).toEqual({ low: 0, high: 0.25 });
    expect(hitRateRangeAtFalseAlarm(scores, signal, 1)).toEqual({ low: 0.75, high: 1 });
    // inside a sloped or flat segment both ends are the interpolated point
    expect(hitRateRangeAtFalseAlarm(scores, signal, 0.25)).toEqual({ low: 0.25, high: 0.25 });
  });

  it('hitRateRangeAtFalseAlarm: high is hitRateAtFalseAlarm, and every threshold with false-alarm rate F has its hit rate in [low, high]', () => {
    const random = createRandom(17);
    const n = 60;
    const s = Float64Array.from({ length: n }, () => Math.round(random.normal() * 4) / 2);
    const flags = Uint8Array.from({ length: n }, (_, i) => (i % 3 === 0 ? 1 : 0));
    for (let k = 0; k < n; k++) if (flags[k]) s[k]! += 1;
    const signals = flags.reduce((a, b) => a + b, 0);
    for (const t of [...new Set(s)].sort((a, b) => a - b)) {
      let hits = 0;
      let fas = 0;
      for (let k = 0; k < n; k++) if (s[k]! > t) flags[k] ? hits++ : fas++;
      const f = fas / (n - signals);
      const range = hitRateRangeAtFalseAlarm(s, flags, f);
      expect(range.high).toBe(hitRateAtFalseAlarm(s, flags, f));
      expect(hits / signals).toBeGreaterThanOrEqual(range.low);
      expect(hits / signals).toBeLessThanOrEqual(range.high);
    }
  });
});

describe('criterionShiftControl', () => {
  it('criterionShiftControl reproduces an achievable false-alarm rate exactly and its hit rate lies on the ROC', () => {
    // Untied continuous scores: every count k/nN is achievable, and the shifted rule is one ROC point.
    const random = createRandom(21);
    const n = 200;
    const scores = new Float64Array(n);
    const isSignal = new Uint8Array(n);
    for (let i = 0; i < n; i++) {
      isSignal[i] = i % 2;
      scores[i] = random.normal() + isSignal[i]!;
    }
    const noise = n / 2;
    for (const k of [0, 7, 30, 64, 100]) {
      const control = criterionShiftControl(scores, isSignal, 0.25, k / noise);
      expect(control.falseAlarmRate).toBe(k / noise);
      // Applying the shift the way a caller would (base + s > threshold) gives the same table.
      let hits = 0;
      let falseAlarms = 0;
      for (let i = 0; i < n; i++) {
        if (scores[i]! + control.shift > 0.25) {
          if (isSignal[i]) hits++;
          else falseAlarms++;
        }
      }
      expect(falseAlarms / noise).toBe(control.falseAlarmRate);
      expect(hits / (n / 2)).toBe(control.hitRate);
      expect(control.hitRate).toBeLessThanOrEqual(hitRateAtFalseAlarm(scores, isSignal, k / noise));
    }
  });

  it('criterionShiftControl(target = the unshifted FA rate) gives the unshifted table', () => {
    const { scores, isSignal } = randomTrials(3, 120);
    let hits = 0;
    let falseAlarms = 0;
    let signal = 0;
    for (let i = 0; i < scores.length; i++) {
      if (isSignal[i]) signal++;
      if (scores[i]! > 0.1) {
        if (isSignal[i]) hits++;
        else falseAlarms++;
      }
    }
    const control = criterionShiftControl(scores, isSignal, 0.1, falseAlarms / (scores.length - signal));
    expect(control.shift).toBe(0);
    expect(control.falseAlarmRate).toBe(falseAlarms / (scores.length - signal));
    expect(control.hitRate).toBe(hits / signal);
  });

  it('criterionShiftControl moves the criterion no further than needed (crosses no extra signal score)', () => {
    // Hand-worked: noise 1, 3, 5; signal 2, 4, 6; threshold 0 (all "yes"). Target 1/3: one noise above the
    // cut, valid cuts [3, 5); nearest to 0 is 3 → shift −3, hits {4, 6} = 2/3.
    // Target 2/3 from threshold 10 (all "no"): valid cuts [1, 3); just below 3, midway to 2 → cut 2.5,
    // shift 7.5, hits {4, 6} = 2/3 (the signal score 2 is not crossed).
    const scores = [1, 3, 5, 2, 4, 6];
    const isSignal = Uint8Array.from([0, 0, 0, 1, 1, 1]);
    expect(criterionShiftControl(scores, isSignal, 0, 1 / 3)).toEqual({ shift: -3, hitRate: 2 / 3, falseAlarmRate: 1 / 3 });
    expect(criterionShiftControl(scores, isSignal, 10, 2 / 3)).toEqual({ shift: 7.5, hitRate: 2 / 3, falseAlarmRate: 2 / 3 });
    expect(criterionShiftControl(scores, isSignal, 4.5, 1 / 3)).toEqual({ shift: 0, hitRate: 1 / 3, falseAlarmRate: 1 / 3 });
  });

  it('criterionShiftControl with tied noise scores takes the nearest achievable count, smaller on a tie', () => {
    // Noise 0, 1, 1, 2: achievable false-alarm counts 0, 1, 3, 4. Target 2/4 is 1 away from both 1 and 3 → 1.
    const scores = [0, 1, 1, 2, 3];
    const isSignal = Uint8Array.from([0, 0, 0, 0, 1]);
    expect(criterionShiftControl(scores, isSignal, 0, 0.5).falseAlarmRate).toBe(0.25);
    expect(criterionShiftControl(scores, isSignal, 0, 0.7).falseAlarmRate).toBe(0.75);
    expect(criterionShiftControl(scores, isSignal, 0, 0).falseAlarmRate).toBe(0);
    expect(criterionShiftControl(scores, isSignal, 0, 1).falseAlarmRate).toBe(1);
    expect(() => criterionShiftControl(scores, isSignal, Number.NaN, 0.5)).toThrow(UsageError);
    expect(Number.isNaN(criterionShiftControl([1, 2], Uint8Array.from([1, 1]), 0, 0.5).shift)).toBe(true);
  });
});
