/**
 * The empirical ROC curve of a decision variable: the (false-alarm rate, hit rate) points of every
 * threshold between distinct scores, from (0, 0) to (1, 1). Tied scores move both rates in one step (a
 * diagonal segment), so the trapezoidal area under the points equals the ROC area with ties counted
 * half (Hanley & McNeil 1982), which `rocAuc` computes by ranks.
 */

/** One point of an ROC curve. */
export interface RocPoint {
  falseAlarmRate: number;
  hitRate: number;
}

/**
 * @param scores decision variable per trial; @param isSignal 1 where the signal (the category) is present.
 * @returns the points, by increasing false-alarm rate; [(0,0), (1,1)] when a class is empty.
 * Edge cases: NaN scores are left out of both classes.
 */
export function rocCurve(scores: ArrayLike<number>, isSignal: Uint8Array): RocPoint[] {
  const order: number[] = [];
  let signal = 0;
  let noise = 0;
  for (let i = 0; i < scores.length; i++) {
    if (Number.isNaN(scores[i]!)) continue;
    order.push(i);
    if (isSignal[i]) signal++;
    else noise++;
  }
  if (signal === 0 || noise === 0) return [{ falseAlarmRate: 0, hitRate: 0 }, { falseAlarmRate: 1, hitRate: 1 }];
  order.sort((p, q) => scores[q]! - scores[p]!);
  const points: RocPoint[] = [{ falseAlarmRate: 0, hitRate: 0 }];
  let hits = 0;
  let falseAlarms = 0;
  for (let k = 0; k < order.length; ) {
    const value = scores[order[k]!]!;
    // every trial with this score crosses the threshold together
    while (k < order.length && scores[order[k]!]! === value) {
      if (isSignal[order[k]!]) hits++;
      else falseAlarms++;
      k++;
    }
    points.push({ falseAlarmRate: falseAlarms / noise, hitRate: hits / signal });
  }
  return points;
}

/** Trapezoidal area under ROC points (by increasing false-alarm rate). */
export function rocCurveArea(points: readonly RocPoint[]): number {
  let area = 0;
  for (let i = 1; i < points.length; i++) area += ((points[i]!.falseAlarmRate - points[i - 1]!.falseAlarmRate) * (points[i]!.hitRate + points[i - 1]!.hitRate)) / 2;
  return area;
}
