/**
 * One-line bar charts for terminal tables: each value becomes one of the eight block characters
 * U+2581…U+2588 (▁▂▃▄▅▆▇█), scaled between the smallest and largest value.
 */

const BARS = ['▁', '▂', '▃', '▄', '▅', '▆', '▇', '█'] as const;

/** Options of `sparkline`. */
export interface SparklineOptions {
  /** Value drawn as ▁ (default: the smallest finite value); use a fixed scale to compare rows. */
  min?: number;
  /** Value drawn as █ (default: the largest finite value). */
  max?: number;
}

/**
 * A sparkline of the values, one character per value, min–max scaled: level = round(7·(v − min)/(max − min)).
 *
 * @param values the series, in display order.
 * @param options optional fixed min and max; values outside are clamped to ▁ / █.
 * @returns a string of the same length as `values`.
 * @throws never.
 * Edge cases: NaN → a space (a gap, never a bar); +Infinity → █ and −Infinity → ▁, both left out of the
 * default scale; when all finite values are equal (or min ≥ max) every finite value is drawn as ▄;
 * an empty series gives "".
 */
export function sparkline(values: readonly number[], options: SparklineOptions = {}): string {
  let min = options.min ?? Number.POSITIVE_INFINITY;
  let max = options.max ?? Number.NEGATIVE_INFINITY;
  if (options.min === undefined || options.max === undefined) {
    for (const v of values) {
      if (!Number.isFinite(v)) continue;
      if (options.min === undefined && v < min) min = v;
      if (options.max === undefined && v > max) max = v;
    }
  }
  const span = max - min;
  const flat = !(span > 0) || !Number.isFinite(span);
  let line = '';
  for (const v of values) {
    if (Number.isNaN(v)) line += ' ';
    else if (v === Number.POSITIVE_INFINITY) line += BARS[7];
    else if (v === Number.NEGATIVE_INFINITY) line += BARS[0];
    else if (flat) line += BARS[3];
    else {
      const level = Math.round((7 * (v - min)) / span);
      line += BARS[level < 0 ? 0 : level > 7 ? 7 : level];
    }
  }
  return line;
}
