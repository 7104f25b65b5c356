import { UsageError } from '../errors.js';
import { createRandom } from '../random.js';

/** Result of a paired sign-flip test. */
export interface SignFlipResult {
  /** Number of differences. */
  n: number;
  /** Mean of the differences. */
  mean: number;
  /** One-sided p value for H1: mean > 0 (the observed sign pattern counts as one of the arrangements). */
  pValue: number;
  /** True when all 2^n sign patterns were enumerated; false for a seeded Monte Carlo estimate. */
  exact: boolean;
}

/**
 * Paired sign-flip (randomisation) test of the mean of paired differences: under H0 each difference is
 * symmetric about 0, so flipping signs gives equally likely arrangements (Fisher 1935, "The Design of
 * Experiments", §21; the one-sample permutation test). p = (#arrangements with mean ≥ observed) / 2^n,
 * enumerated exactly for n ≤ 20, otherwise estimated from `samples` random flips with the observed one
 * counted ((k + 1) / (samples + 1)).
 * @throws UsageError for an empty input or a non-finite difference.
 */
export function signFlipTest(differences: ArrayLike<number>, options: { samples?: number; seed?: number } = {}): SignFlipResult {
  const n = differences.length;
  if (n === 0) throw new UsageError('E_SIGN_FLIP', 'sign-flip test needs at least one difference');
  let total = 0;
  for (let i = 0; i < n; i++) {
    const d = differences[i]!;
    if (!Number.isFinite(d)) throw new UsageError('E_SIGN_FLIP', `sign-flip test: difference ${i} is ${d}`);
    total += d;
  }
  // compare sums with a relative tolerance so that arrangements equal to the observed one count as ≥
  const tolerance = 1e-12 * (Math.abs(total) + 1);
  if (n <= 20) {
    let atLeast = 0;
    const patterns = 2 ** n;
    for (let mask = 0; mask < patterns; mask++) {
      let sum = 0;
      for (let i = 0; i < n; i++) sum += mask & (1 << i) ? -differences[i]! : differences[i]!;
      if (sum >= total - tolerance) atLeast++;
    }
    return { n, mean: total / n, pValue: atLeast / patterns, exact: true };
  }
  const samples = options.samples ?? 100_000;
  const rng = createRandom(options.seed ?? 0);
  let atLeast = 0;
  for (let s = 0; s < samples; s++) {
    let sum = 0;
    for (let i = 0; i < n; i++) sum += rng.uniform() < 0.5 ? -differences[i]! : differences[i]!;
    if (sum >= total - tolerance) atLeast++;
  }
  return { n, mean: total / n, pValue: (atLeast + 1) / (samples + 1), exact: false };
}
