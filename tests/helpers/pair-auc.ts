/**
 * ROC area by direct count over all (signal, noise) pairs, ties counting one half: the Mann–Whitney U
 * statistic divided by n₁·n₀ (the exact definition of the empirical ROC area). An O(n²) reference the
 * fast rank-based kernels in src/stats/roc.ts are checked against.
 * @param scores one score per trial; @param signal truthy for signal trials.
 */
export function pairAuc(scores: ArrayLike<number>, signal: ArrayLike<number>): number {
  let wins = 0;
  let pairs = 0;
  for (let i = 0; i < scores.length; i++) {
    if (!signal[i]) continue;
    for (let j = 0; j < scores.length; j++) {
      if (signal[j]) continue;
      pairs++;
      wins += scores[i]! > scores[j]! ? 1 : scores[i]! === scores[j]! ? 0.5 : 0;
    }
  }
  return wins / pairs;
}
