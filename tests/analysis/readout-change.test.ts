import { describe, expect, it } from 'vitest';
import { readoutChanges } from '../../src/analysis/readout-change.js';
import { rocAuc } from '../../src/stats/roc.js';
import { detectFromScores } from '../../src/stats/signal-detection.js';
import { createRandom } from '../../src/random.js';

/** Two-class scores with unequal spreads (noise sd 1, signal sd 2.3), on a 1/64 grid so shifts are exact. */
function unequalSpread(seed: number, n: number): { scores: Float64Array; signal: Uint8Array } {
  const random = createRandom(seed);
  const scores = new Float64Array(n);
  const signal = new Uint8Array(n);
  for (let i = 0; i < n; i++) {
    signal[i] = i % 2;
    scores[i] = Math.round((signal[i] ? 1 + 2.3 * random.normal() : random.normal()) * 64) / 64;
  }
  return { scores, signal };
}

describe('readoutChanges', () => {
  it('readoutChanges(base + constant) leaves ROC area and matched hit rate unchanged exactly while fixed-threshold d′ changes', () => {
    // Exact property: adding a constant preserves the order of the scores, so every ROC point is the same;
    // the fixed threshold, however, meets the shifted scores at another place (a pure criterion move).
    const { scores, signal } = unequalSpread(3, 400);
    const threshold = 0;
    const base = { scores, signal, threshold, detection: detectFromScores(scores, signal, threshold) };
    for (const shift of [0.75, -0.5, 1.5]) {
      const mod = scores.map((s) => s + shift);
      const modDetection = detectFromScores(mod, signal, threshold);
      expect(rocAuc(mod, signal)).toBe(rocAuc(scores, signal));
      expect(Math.abs(modDetection.dPrime - base.detection.dPrime)).toBeGreaterThan(0.02);
      const changes = readoutChanges(base, mod, modDetection.falseAlarmRate);
      expect(changes.matchedHitRatePp).toBe(0);
      // the control reproduces the modulated false-alarm rate: apply its shift to the baseline scores
      let falseAlarms = 0;
      for (let i = 0; i < scores.length; i++) if (!signal[i] && scores[i]! + changes.criterionControl.shift > threshold) falseAlarms++;
      expect(falseAlarms / 200).toBe(modDetection.falseAlarmRate);
      // and here it is the modulation itself, up to the signal scores inside the noise gap it had to cross
      expect(Math.abs(changes.criterionControl.hitRatePp - 100 * (modDetection.hitRate - base.detection.hitRate))).toBeLessThanOrEqual(100 * (4 / 200));
    }
  });

  it('readoutChanges(base, base) is zero throughout, and a gain that separates the classes raises the matched hit rate', () => {
    const { scores, signal } = unequalSpread(8, 300);
    const base = { scores, signal, threshold: 0.5, detection: detectFromScores(scores, signal, 0.5) };
    const same = readoutChanges(base, scores, base.detection.falseAlarmRate);
    expect(same.matchedHitRatePp).toBe(0);
    expect(same.criterionControl).toEqual({ shift: 0, hitRatePp: 0, dPrime: 0 });
    // the range is symmetric about 0 (± the height of the curve's stretch at F)
    expect(same.matchedHitRateRangePp[0]).toBeCloseTo(-same.matchedHitRateRangePp[1], 12);
    // signal scores pushed up by 1: better separation at every false-alarm rate
    const better = scores.map((s, i) => (signal[i] ? s + 1 : s));
    const changes = readoutChanges(base, better, detectFromScores(better, signal, 0.5).falseAlarmRate);
    expect(changes.matchedHitRatePp).toBeGreaterThan(5);
    // false alarms did not change, so the criterion-only control is the baseline itself
    expect(changes.criterionControl).toEqual({ shift: 0, hitRatePp: 0, dPrime: 0 });
  });

  it('readoutChanges with a non-finite threshold gives a NaN control but a measured matched hit rate', () => {
    const { scores, signal } = unequalSpread(4, 50);
    const base = { scores, signal, threshold: Number.NEGATIVE_INFINITY, detection: detectFromScores(scores, signal, Number.NEGATIVE_INFINITY) };
    const changes = readoutChanges(base, scores, 1);
    expect(changes.matchedHitRatePp).toBe(0);
    expect(changes.criterionControl.shift).toBeNaN();
  });

  it('readoutChanges: with the false-alarm rate unchanged, the fixed-threshold hit-rate change lies inside the matched range (the vertical-stretch case that once read −3 pp beside +2 pp)', () => {
    // 4 signal, 2 noise trials, threshold 2.5 → base: hits 5 and 3 (H ½), false alarm 4 (F ½)
    const base = [5, 4, 3, 2, 1, 0];
    const signal = Uint8Array.from([1, 0, 1, 1, 0, 1]);
    // the modulated readout lifts the signal score at 2 over the threshold and the one at 0 just below it: H ¾, F still ½
    const mod = [5, 4, 3, 2.6, 1, 2.4];
    const threshold = 2.5;
    const sb = detectFromScores(base, signal, threshold);
    const sm = detectFromScores(mod, signal, threshold);
    expect([sb.hitRate, sb.falseAlarmRate, sm.hitRate, sm.falseAlarmRate]).toEqual([0.5, 0.5, 0.75, 0.5]);
    const r = readoutChanges({ scores: base, signal, threshold, detection: sb }, mod, sm.falseAlarmRate);
    const fixedChangePp = 100 * (sm.hitRate - sb.hitRate);
    // hand-read: base ROC at F = ½ runs from ¼ to ¾, modulated from ¼ to 1 → middles ½ and ⅝, range [¼ − ¾, 1 − ¼]
    expect(r.matchedHitRatePp).toBeCloseTo(12.5, 10);
    expect(r.matchedHitRateRangePp[0]).toBeCloseTo(-50, 10);
    expect(r.matchedHitRateRangePp[1]).toBeCloseTo(75, 10);
    expect(fixedChangePp).toBeGreaterThanOrEqual(r.matchedHitRateRangePp[0]);
    expect(fixedChangePp).toBeLessThanOrEqual(r.matchedHitRateRangePp[1]);
    // the same sign as the operating points: the top-of-stretch reading alone gave 1 − ¾ = +25 here but can fall below
    expect(Math.sign(r.matchedHitRatePp)).toBe(Math.sign(fixedChangePp));
  });
});
