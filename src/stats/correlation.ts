/**
 * Association between two paired samples: Pearson's r, Spearman's rank correlation (average ranks for
 * ties) and the least-squares line. Two-pass formulas (means first, then centred sums) in doubles, so that
 * a large common offset does not cancel digits.
 *
 * Edge-case policy for this file: lengths must match (UsageError otherwise). Fewer than 2 pairs, or a
 * sample with zero spread, make r NaN (the correlation is undefined, not 0). NaN values are never
 * skipped: they make every result NaN.
 */

import { UsageError } from '../errors.js';

/**
 * Pearson's product-moment correlation r = Σ(x−x̄)(y−ȳ) / √(Σ(x−x̄)² Σ(y−ȳ)²).
 *
 * @param x first sample.
 * @param y second sample, same length.
 * @returns r in [−1, 1] (clamped against rounding); NaN when n < 2, either sample is constant, or a value is NaN.
 * @throws UsageError when the lengths differ.
 */
export function pearson(x: ArrayLike<number>, y: ArrayLike<number>): number {
  return centredMoments(x, y, 'pearson').r;
}

/**
 * Spearman's rank correlation: Pearson's r of the average ranks (ties share the mean of the ranks they
 * span), which is exact with ties, unlike the 1 − 6Σd²/(n(n²−1)) shortcut.
 *
 * @param x first sample.
 * @param y second sample, same length.
 * @returns ρ in [−1, 1]; NaN when n < 2, either sample is constant, or any value is NaN.
 * @throws UsageError when the lengths differ.
 */
export function spearman(x: ArrayLike<number>, y: ArrayLike<number>): number {
  checkLengths(x, y, 'spearman');
  if (hasNaN(x) || hasNaN(y)) return Number.NaN;
  return pearson(averageRanks(x), averageRanks(y));
}

/**
 * Ranks 1…n of the values, ties given the average of the ranks they occupy (the "fractional ranking").
 *
 * @param values the sample (not modified).
 * @returns ranks as a Float64Array in the input order.
 * @throws never.
 * Edge cases: NaN values rank last (after +Infinity), sharing their average rank; callers that must not
 * rank NaN check first (as `spearman` does).
 */
export function averageRanks(values: ArrayLike<number>): Float64Array {
  const n = values.length;
  const key = Float64Array.from(values);
  const order = new Int32Array(n);
  for (let i = 0; i < n; i++) order[i] = i;
  order.sort((a, b) => compareWithNaNLast(key[a]!, key[b]!) || a - b);
  const ranks = new Float64Array(n);
  let start = 0;
  while (start < n) {
    let end = start + 1;
    const value = key[order[start]!]!;
    while (end < n && sameValue(key[order[end]!]!, value)) end++;
    // Positions start..end−1 hold ranks start+1..end; their average is (start + 1 + end) / 2.
    const rank = (start + 1 + end) / 2;
    for (let i = start; i < end; i++) ranks[order[i]!] = rank;
    start = end;
  }
  return ranks;
}

/** A least-squares straight line y ≈ intercept + slope·x. */
export interface LinearFit {
  /** Σ(x−x̄)(y−ȳ) / Σ(x−x̄)². */
  slope: number;
  /** ȳ − slope·x̄. */
  intercept: number;
  /** Pearson's r of the pairs. */
  r: number;
  /** Number of pairs. */
  n: number;
}

/**
 * Ordinary least-squares line of y on x.
 *
 * @param x predictor.
 * @param y response, same length.
 * @returns slope, intercept, r and n.
 * @throws UsageError when the lengths differ.
 * Edge cases: n < 2 or constant x → slope, intercept and r NaN (no line is determined); constant y with
 * varying x → slope 0, intercept ȳ, r NaN (the line is exact but the correlation is undefined);
 * any NaN → all NaN.
 */
export function linearFit(x: ArrayLike<number>, y: ArrayLike<number>): LinearFit {
  const m = centredMoments(x, y, 'linearFit');
  const slope = m.n >= 2 && m.sxx > 0 ? m.sxy / m.sxx : Number.NaN;
  return { slope, intercept: m.meanY - slope * m.meanX, r: m.r, n: m.n };
}

interface Moments {
  n: number;
  meanX: number;
  meanY: number;
  sxx: number;
  syy: number;
  sxy: number;
  r: number;
}

function centredMoments(x: ArrayLike<number>, y: ArrayLike<number>, caller: string): Moments {
  checkLengths(x, y, caller);
  const n = x.length;
  let sumX = 0;
  let sumY = 0;
  let constantX = true;
  let constantY = true;
  const firstX = n > 0 ? x[0]! : Number.NaN;
  const firstY = n > 0 ? y[0]! : Number.NaN;
  for (let i = 0; i < n; i++) {
    const xi = x[i]!;
    const yi = y[i]!;
    sumX += xi;
    sumY += yi;
    constantX &&= xi === firstX;
    constantY &&= yi === firstY;
  }
  // A constant sample's mean is its value exactly (sum/n may round away from it and fake a tiny spread).
  const meanX = constantX ? firstX : sumX / n;
  const meanY = constantY ? firstY : sumY / n;
  let sxx = 0;
  let syy = 0;
  let sxy = 0;
  let residualX = 0; // Σ(x − x̄), ideally 0; used to correct the mean's rounding (corrected two-pass)
  let residualY = 0;
  for (let i = 0; i < n; i++) {
    const dx = x[i]! - meanX;
    const dy = y[i]! - meanY;
    sxx += dx * dx;
    syy += dy * dy;
    sxy += dx * dy;
    residualX += dx;
    residualY += dy;
  }
  // Corrected two-pass algorithm (Chan, Golub & LeVeque 1983, The American Statistician 37:242).
  sxx -= (residualX * residualX) / n;
  syy -= (residualY * residualY) / n;
  sxy -= (residualX * residualY) / n;
  let r = Number.NaN;
  if (n >= 2 && sxx > 0 && syy > 0) r = Math.max(-1, Math.min(1, sxy / Math.sqrt(sxx * syy)));
  return { n, meanX, meanY, sxx, syy, sxy, r };
}

function checkLengths(x: ArrayLike<number>, y: ArrayLike<number>, caller: string): void {
  if (x.length !== y.length) {
    throw new UsageError('E_PAIRED_LENGTH', `${caller}(x, y): x has ${x.length} values but y has ${y.length}`, {
      hint: 'pass paired samples of equal length',
    });
  }
}

function hasNaN(values: ArrayLike<number>): boolean {
  for (let i = 0; i < values.length; i++) if (Number.isNaN(values[i]!)) return true;
  return false;
}

function compareWithNaNLast(a: number, b: number): number {
  const aNaN = Number.isNaN(a);
  const bNaN = Number.isNaN(b);
  if (aNaN || bNaN) return aNaN === bNaN ? 0 : aNaN ? 1 : -1;
  return a < b ? -1 : a > b ? 1 : 0;
}

function sameValue(a: number, b: number): boolean {
  return a === b || (Number.isNaN(a) && Number.isNaN(b));
}
