/**
 * Bootstrap intervals of sweep cells. Every cell of a sweep is scored on the same stimuli, so one set of
 * resamples (stimulus multiplicities, drawn once from a fixed seed) serves them all: a cell keeps the
 * change of its ROC area and of its d′ in each resample ("draws"), and the mean over cued categories of a
 * site × scheme × strength has its interval from the means of the draws, resample by resample (a paired
 * percentile bootstrap over stimuli, as in `diff`).
 */
import { rocAucWeighted, rocOrder } from '../stats/roc.js';
import { detectionStats } from '../stats/signal-detection.js';
import { createRandom } from '../random.js';

/** Resamples per sweep (each costs O(stimuli) per cell). */
export const SWEEP_RESAMPLES = 200;

/**
 * Multiplicities of `resamples` bootstrap resamples of n stimuli (each n draws with replacement), from a
 * seeded generator: the same for every cell of a sweep, and for every run with the same n and seed.
 */
export function sweepResampling(n: number, resamples = SWEEP_RESAMPLES, seed = 'sweep-bootstrap'): Float64Array[] {
  const random = createRandom(seed);
  const out: Float64Array[] = [];
  for (let r = 0; r < resamples; r++) {
    const weights = new Float64Array(n);
    for (let i = 0; i < n; i++) weights[random.int(n)]! += 1;
    out.push(weights);
  }
  return out;
}

/**
 * ROC area and d′ (at `threshold`, log-linear correction where a rate is 0 or 1, as everywhere) of one
 * readout in every resample.
 * @returns { auc, dPrime }, one value per resample (NaN where a class drew no trial).
 */
export function readoutDraws(scores: ArrayLike<number>, signal: Uint8Array, threshold: number, resampling: readonly Float64Array[]): { auc: Float64Array; dPrime: Float64Array } {
  const order = rocOrder(scores);
  const auc = new Float64Array(resampling.length);
  const dPrime = new Float64Array(resampling.length);
  resampling.forEach((weights, r) => {
    auc[r] = rocAucWeighted(scores, signal, weights, order);
    let hits = 0;
    let signals = 0;
    let falseAlarms = 0;
    let noise = 0;
    for (let i = 0; i < weights.length; i++) {
      const w = weights[i]!;
      if (w === 0 || !Number.isFinite(scores[i]!)) continue;
      const yes = scores[i]! > threshold;
      if (signal[i] !== 0) {
        signals += w;
        if (yes) hits += w;
      } else {
        noise += w;
        if (yes) falseAlarms += w;
      }
    }
    dPrime[r] = signals > 0 && noise > 0 ? detectionStats({ hits, signalTrials: signals, falseAlarms, noiseTrials: noise }).dPrime : Number.NaN;
  });
  return { auc, dPrime };
}

/**
 * The 95 % percentile interval of draws (NaN draws left out), or null with fewer than 20 finite draws.
 */
export function percentileInterval(draws: ArrayLike<number>, level = 0.95): [number, number] | null {
  const finite = Array.from(draws).filter((v) => Number.isFinite(v)).sort((a, b) => a - b);
  if (finite.length < 20) return null;
  const at = (q: number) => {
    const x = q * (finite.length - 1);
    const lo = Math.floor(x);
    const hi = Math.min(finite.length - 1, lo + 1);
    return finite[lo]! + (x - lo) * (finite[hi]! - finite[lo]!);
  };
  return [at((1 - level) / 2), at(1 - (1 - level) / 2)];
}

/** Elementwise mean of several cells' draws (same resamples), or null when none has draws or lengths differ. */
export function meanDraws(lists: ReadonlyArray<ArrayLike<number> | undefined>): Float64Array | null {
  if (lists.length === 0 || lists.some((d) => d === undefined)) return null;
  const length = lists[0]!.length;
  if (lists.some((d) => d!.length !== length)) return null;
  const out = new Float64Array(length);
  for (const d of lists) for (let r = 0; r < length; r++) out[r]! += d![r]!;
  for (let r = 0; r < length; r++) out[r]! /= lists.length;
  return out;
}
