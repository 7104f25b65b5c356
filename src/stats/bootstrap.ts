/**
 * Nonparametric bootstrap confidence intervals by the percentile method (Efron & Tibshirani 1993,
 * "An Introduction to the Bootstrap", ch. 13): resample the n units with replacement, recompute the
 * statistic, and take the (1 − level)/2 and (1 + level)/2 quantiles of the replicates (type 7).
 * Resampling draws from `createRandom(seed)`, so a seed reproduces the interval exactly.
 */

import { UsageError } from '../errors.js';
import { createRandom } from '../random.js';
import { quantileSorted } from './describe.js';

/** Options of the bootstrap. */
export interface BootstrapOptions {
  /** Number of resamples (replicates), an integer ≥ 1; 1000–10000 is usual. */
  resamples: number;
  /** Seed of the resampling stream (same seed → same intervals). */
  seed: number | string;
  /** Coverage of the interval in (0, 1); default 0.95. */
  level?: number;
}

/** A percentile bootstrap interval. */
export interface BootstrapInterval {
  /** The statistic on the original sample (indices 0…n−1 in order). */
  estimate: number;
  /** Lower percentile bound ((1 − level)/2 quantile of the finite replicates). */
  low: number;
  /** Upper percentile bound ((1 + level)/2 quantile of the finite replicates). */
  high: number;
  /** Sample standard deviation (n − 1) of the finite replicates: the bootstrap standard error. */
  sd: number;
  /** Replicates requested. */
  resamples: number;
  /** Replicates that were NaN or ±Infinity: counted here and excluded from low, high and sd. */
  excluded: number;
  /** The coverage used. */
  level: number;
}

/**
 * Percentile bootstrap interval of one statistic.
 *
 * @param n number of units to resample (stimuli, trials); an integer ≥ 1.
 * @param statistic computes the statistic from the indices of a sample (length n, values in [0, n),
 *   with repeats). The array is reused between calls: read it, do not keep it.
 * @param options resamples, seed, level (default 0.95).
 * @returns estimate, low, high, sd, resamples, excluded, level.
 * @throws UsageError when n or resamples is not a positive integer or level is not in (0, 1).
 * Edge cases: replicates that are NaN or ±Infinity are counted in `excluded` and left out; if fewer
 * than 2 remain, sd is NaN, and if none remain, low and high are NaN too.
 */
export function bootstrapInterval(
  n: number,
  statistic: (indices: Int32Array) => number,
  options: BootstrapOptions,
): BootstrapInterval {
  const [interval] = bootstrapIntervals(
    n,
    (indices, out) => {
      out[0] = statistic(indices);
    },
    1,
    options,
  );
  return interval!;
}

/**
 * Percentile bootstrap intervals of several statistics computed from the same resamples (so that, e.g.,
 * a slope and an intercept come from the same resampled fits).
 *
 * @param n number of units to resample; an integer ≥ 1.
 * @param statistics writes the `outputs` statistics of the sample given by `indices` into `out`
 *   (length `outputs`). Both arrays are reused between calls.
 * @param outputs how many statistics `statistics` writes; an integer ≥ 1.
 * @param options resamples, seed, level (default 0.95).
 * @returns one interval per statistic, in output order.
 * @throws UsageError on a bad n, outputs, resamples or level.
 * Edge cases: as `bootstrapInterval`, per statistic (a replicate excluded for one statistic still counts
 * for the others).
 */
export function bootstrapIntervals(
  n: number,
  statistics: (indices: Int32Array, out: Float64Array) => void,
  outputs: number,
  options: BootstrapOptions,
): BootstrapInterval[] {
  const { resamples, seed } = options;
  const level = options.level ?? 0.95;
  checkPositiveInteger('bootstrap sample size n', n);
  checkPositiveInteger('bootstrap outputs', outputs);
  checkPositiveInteger('bootstrap resamples', resamples);
  if (!(level > 0 && level < 1)) {
    throw new UsageError('E_BOOTSTRAP_OPTION', `bootstrap level ${String(level)} is not in (0, 1)`, {
      hint: 'use e.g. 0.95 for a 95% interval',
    });
  }
  const indices = new Int32Array(n);
  const out = new Float64Array(outputs);
  for (let i = 0; i < n; i++) indices[i] = i;
  statistics(indices, out);
  const estimates = Float64Array.from(out);

  // replicates[j * resamples + b]: statistic j of resample b.
  const replicates = new Float64Array(outputs * resamples);
  const random = createRandom(seed);
  for (let b = 0; b < resamples; b++) {
    for (let i = 0; i < n; i++) indices[i] = random.int(n);
    out.fill(Number.NaN);
    statistics(indices, out);
    for (let j = 0; j < outputs; j++) replicates[j * resamples + b] = out[j]!;
  }

  const result: BootstrapInterval[] = [];
  const lowP = (1 - level) / 2;
  const highP = (1 + level) / 2;
  for (let j = 0; j < outputs; j++) {
    const values = replicates.subarray(j * resamples, (j + 1) * resamples);
    let kept = 0;
    for (let b = 0; b < resamples; b++) {
      const v = values[b]!;
      if (Number.isFinite(v)) values[kept++] = v;
    }
    const finite = values.subarray(0, kept);
    finite.sort();
    let mean = 0;
    let m2 = 0;
    for (let b = 0; b < kept; b++) {
      const delta = finite[b]! - mean;
      mean += delta / (b + 1);
      m2 += delta * (finite[b]! - mean);
    }
    result.push({
      estimate: estimates[j]!,
      low: quantileSorted(finite, lowP),
      high: quantileSorted(finite, highP),
      sd: kept >= 2 ? Math.sqrt(m2 / (kept - 1)) : Number.NaN,
      resamples,
      excluded: resamples - kept,
      level,
    });
  }
  return result;
}

function checkPositiveInteger(name: string, value: number): void {
  if (!Number.isInteger(value) || value < 1) {
    throw new UsageError('E_BOOTSTRAP_OPTION', `${name} = ${String(value)} is not a positive integer`);
  }
}
