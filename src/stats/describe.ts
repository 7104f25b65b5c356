/**
 * Descriptive statistics of one sample: variance by Welford's method, mean by compensated summation,
 * median, and quantiles by linear interpolation (Hyndman & Fan type 7, the default of R's `quantile`).
 *
 * NaN policy for this file: values are never skipped. A NaN anywhere makes the result NaN; ±Infinity
 * follows IEEE arithmetic (e.g. the mean is ±Infinity, the variance NaN). Callers that want to drop bad
 * values count and remove them first, so that the count can be reported.
 */

import { UsageError } from '../errors.js';

/** Mean, variance and extremes of a sample. */
export interface Description {
  /** Number of values. */
  n: number;
  /** Arithmetic mean (NaN when n = 0). */
  mean: number;
  /** Sample variance with n − 1 in the denominator (NaN when n < 2). */
  variance: number;
  /** √variance. */
  sd: number;
  /** Smallest value (NaN when n = 0 or any value is NaN). */
  min: number;
  /** Largest value (NaN when n = 0 or any value is NaN). */
  max: number;
  /** How many values were NaN or ±Infinity (they are included in the statistics, see the file note). */
  nonFinite: number;
}

/**
 * Mean, sample variance (n − 1), sd, min, max in one pass, in doubles: the variance by Welford's update
 * (Welford 1962, Technometrics 4:419), the mean from a compensated sum (as `mean`).
 *
 * @param values the sample.
 * @returns the description; see field docs for small n.
 * @throws never.
 * Edge cases: empty → n 0 and NaN everywhere; one value → variance NaN; NaN values propagate and are counted.
 */
export function describe(values: ArrayLike<number>): Description {
  const n = values.length;
  let mean = 0;
  let m2 = 0;
  let min = Number.POSITIVE_INFINITY;
  let max = Number.NEGATIVE_INFINITY;
  let nonFinite = 0;
  let sawNaN = false;
  let sum = 0;
  let compensation = 0;
  for (let i = 0; i < n; i++) {
    const x = values[i]!;
    const delta = x - mean;
    mean += delta / (i + 1);
    m2 += delta * (x - mean);
    const next = sum + x;
    compensation += Math.abs(sum) >= Math.abs(x) ? sum - next + x : x - next + sum;
    sum = next;
    if (x < min) min = x;
    if (x > max) max = x;
    if (!Number.isFinite(x)) {
      nonFinite++;
      if (Number.isNaN(x)) sawNaN = true;
    }
  }
  if (n === 0) return { n, mean: Number.NaN, variance: Number.NaN, sd: Number.NaN, min: Number.NaN, max: Number.NaN, nonFinite };
  const variance = n < 2 ? Number.NaN : m2 / (n - 1);
  return {
    n,
    mean: finiteMean(sum, compensation, n, mean),
    variance,
    sd: Math.sqrt(variance),
    min: sawNaN ? Number.NaN : min,
    max: sawNaN ? Number.NaN : max,
    nonFinite,
  };
}

/**
 * Arithmetic mean: a compensated sum (Neumaier 1974) divided by n, correct to about one rounding.
 *
 * @param values the sample.
 * @returns the mean; NaN for an empty sample or when any value is NaN; ±Infinity per IEEE with infinite values.
 * @throws never.
 */
export function mean(values: ArrayLike<number>): number {
  const n = values.length;
  if (n === 0) return Number.NaN;
  let sum = 0;
  let compensation = 0;
  for (let i = 0; i < n; i++) {
    const x = values[i]!;
    const next = sum + x;
    compensation += Math.abs(sum) >= Math.abs(x) ? sum - next + x : x - next + sum;
    sum = next;
  }
  return finiteMean(sum, compensation, n, sum / n);
}

/**
 * (sum + compensation) / n; when the plain sum is not finite (an infinity or NaN in the data, where the
 * compensation term is meaningless), the IEEE fallback is returned instead.
 */
function finiteMean(sum: number, compensation: number, n: number, fallback: number): number {
  return Number.isFinite(sum) ? (sum + compensation) / n : fallback;
}

/**
 * Sample variance with n − 1 in the denominator, Welford's method in doubles.
 *
 * @param values the sample.
 * @returns the variance; NaN when n < 2 or any value is NaN (or a value is infinite).
 * @throws never.
 */
export function variance(values: ArrayLike<number>): number {
  const n = values.length;
  if (n < 2) return Number.NaN;
  let m = 0;
  let m2 = 0;
  for (let i = 0; i < n; i++) {
    const x = values[i]!;
    const delta = x - m;
    m += delta / (i + 1);
    m2 += delta * (x - m);
  }
  return m2 / (n - 1);
}

/**
 * Sample standard deviation √variance (n − 1).
 *
 * @param values the sample.
 * @returns the sd; NaN when n < 2 or any value is NaN.
 * @throws never.
 */
export function standardDeviation(values: ArrayLike<number>): number {
  return Math.sqrt(variance(values));
}

/**
 * Median: the middle value, or the average of the two middle values for even n.
 *
 * @param values the sample (not modified; a sorted copy is made).
 * @returns the median; NaN for an empty sample or when any value is NaN.
 * @throws never.
 */
export function median(values: ArrayLike<number>): number {
  const sorted = sortedCopy(values);
  const n = sorted.length;
  if (n === 0 || Number.isNaN(sorted[n - 1]!)) return Number.NaN;
  const half = n >> 1;
  return n % 2 === 1 ? sorted[half]! : (sorted[half - 1]! + sorted[half]!) / 2;
}

/**
 * Sample quantile by linear interpolation between order statistics, type 7 of Hyndman & Fan (1996,
 * The American Statistician 50:361), the default of R's `quantile` (see R's `?quantile`):
 * with sorted x₁ ≤ … ≤ xₙ and h = (n − 1)·p, Q(p) = x⌊h⌋₊₁ + (h − ⌊h⌋)·(x⌊h⌋₊₂ − x⌊h⌋₊₁).
 *
 * @param values the sample (not modified).
 * @param p probability in [0, 1].
 * @returns Q(p); NaN for an empty sample or when any value is NaN.
 * @throws UsageError when p is NaN or outside [0, 1].
 */
export function quantile(values: ArrayLike<number>, p: number): number {
  checkProbability(p);
  const sorted = sortedCopy(values);
  if (sorted.length > 0 && Number.isNaN(sorted[sorted.length - 1]!)) return Number.NaN;
  return quantileSorted(sorted, p);
}

/**
 * Type-7 quantile of values that are already sorted ascending (no copy, no check of the order).
 *
 * @param sorted ascending values without NaN.
 * @param p probability in [0, 1].
 * @returns Q(p); NaN when empty. When h is an integer the order statistic is returned exactly (no
 *   interpolation, so an infinite neighbour cannot turn it into NaN).
 * @throws UsageError when p is NaN or outside [0, 1].
 */
export function quantileSorted(sorted: ArrayLike<number>, p: number): number {
  checkProbability(p);
  const n = sorted.length;
  if (n === 0) return Number.NaN;
  const h = (n - 1) * p;
  const lo = Math.floor(h);
  const fraction = h - lo;
  if (fraction === 0 || lo + 1 >= n) return sorted[lo]!;
  const a = sorted[lo]!;
  return a + fraction * (sorted[lo + 1]! - a);
}

/** Ascending Float64Array copy; typed-array sort orders numerically and puts NaN last. */
function sortedCopy(values: ArrayLike<number>): Float64Array {
  const copy = Float64Array.from(values);
  copy.sort();
  return copy;
}

function checkProbability(p: number): void {
  if (!(p >= 0 && p <= 1)) {
    throw new UsageError('E_QUANTILE_PROBABILITY', `quantile probability ${String(p)} is outside [0, 1]`, {
      hint: 'pass e.g. 0.5 for the median',
    });
  }
}
