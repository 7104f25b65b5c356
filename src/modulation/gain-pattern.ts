/**
 * Gain patterns from per-channel tables: the feature-similarity form g_k = max(0, 1 + β·v_k)
 * (Treue & Martinez-Trujillo 1999; applied to network feature maps as in ../shared/DOMAIN.md), and the
 * normalisation of table values across categories that makes v comparable between channels.
 */
import { UsageError } from '../errors.js';

/** Options of `gainFromValues`. */
export interface GainFromValuesOptions {
  /** When true the clamp at 0 is skipped and g_k = 1 + β·v_k may be negative. Default false. */
  allowNegative?: boolean;
}

/**
 * Turns per-channel values into gains g_k = max(0, 1 + β·v_k).
 * @param values v, one value per channel (normalised across categories, see `normaliseAcrossCategories`).
 * @param strength β; 0 gives all gains 1, negative β lowers the gains of channels with v > 0.
 * @param options `allowNegative`: skip the clamp at 0.
 * @returns A new `Float64Array` of gains, same length as `values`.
 * @throws UsageError when β or any value is NaN/±Inf (naming the index).
 */
export function gainFromValues(values: Float64Array, strength: number, options: GainFromValuesOptions = {}): Float64Array {
  if (!Number.isFinite(strength)) throw new UsageError('E_GAIN', `gainFromValues: strength must be a finite number, got ${strength}`);
  const gains = new Float64Array(values.length);
  for (let k = 0; k < values.length; k++) {
    const v = values[k]!;
    if (!Number.isFinite(v)) throw new UsageError('E_GAIN', `gainFromValues: values[${k}] is ${v}; table values must be finite`);
    gains[k] = 1 + strength * v;
  }
  if (options.allowNegative !== true) {
    for (let k = 0; k < gains.length; k++) if (gains[k]! < 0) gains[k] = 0;
  }
  return gains;
}

/**
 * Z-scores each channel's values across categories: t_kc = (r_kc − mean_c r_kc) / sd_c(r_kc), with the
 * population standard deviation (divide by the number of categories). A z-scored table passes through
 * unchanged (the operation is idempotent). Mean and variance are accumulated in doubles with Welford's
 * method.
 * @param byCategory One vector per category, each of length C (channel k at index k).
 * @returns New vectors, same layout. A channel whose values are all equal across categories (zero
 *   variance, including the one-category case) gets 0 in every category.
 * @throws UsageError when the vectors differ in length or hold NaN/±Inf (naming category and channel).
 */
export function normaliseAcrossCategories(byCategory: readonly Float64Array[]): Float64Array[] {
  const categories = byCategory.length;
  if (categories === 0) return [];
  const channels = byCategory[0]!.length;
  for (let c = 0; c < categories; c++) {
    const row = byCategory[c]!;
    if (row.length !== channels) {
      throw new UsageError('E_GAIN', `normaliseAcrossCategories: category ${c} has ${row.length} channels, category 0 has ${channels}`);
    }
    for (let k = 0; k < channels; k++) {
      if (!Number.isFinite(row[k]!)) throw new UsageError('E_GAIN', `normaliseAcrossCategories: category ${c}, channel ${k} is ${row[k]}; table values must be finite`);
    }
  }
  const out = byCategory.map(() => new Float64Array(channels));
  for (let k = 0; k < channels; k++) {
    let mean = 0;
    let m2 = 0;
    let min = Infinity;
    let max = -Infinity;
    for (let c = 0; c < categories; c++) {
      const x = byCategory[c]![k]!;
      const delta = x - mean;
      mean += delta / (c + 1);
      m2 += delta * (x - mean);
      if (x < min) min = x;
      if (x > max) max = x;
    }
    if (min === max) continue; // zero variance: leave 0
    const sd = Math.sqrt(m2 / categories);
    for (let c = 0; c < categories; c++) out[c]![k] = (byCategory[c]![k]! - mean) / sd;
  }
  return out;
}

/**
 * Indices of the `count` largest values, largest first; ties go to the lower channel index.
 * @throws UsageError when `count` is not an integer in [1, values.length].
 */
export function topChannels(values: Float64Array, count: number): number[] {
  if (!Number.isSafeInteger(count) || count < 1 || count > values.length) {
    throw new UsageError('E_GAIN', `topChannels: count must be an integer in [1, ${values.length}], got ${count}`);
  }
  const order = Array.from({ length: values.length }, (_, k) => k);
  order.sort((a, b) => values[b]! - values[a]! || a - b);
  return order.slice(0, count);
}
