/**
 * What a layer file needs from a batch of activations besides the bytes themselves: channel means and
 * the count of values that are NaN or ±Infinity as stored. Both come from one pass over the data — the
 * means pass (`featureMeans`) — because a sum of finite float32 values accumulated in a double is always
 * finite (at most 2^128 per value, far below 2^1024), so a feature whose mean is finite holds no NaN or
 * ±Infinity and only the rare non-finite features are read a second time to count.
 *
 * Float16 activations arrive as IEEE 754 binary16 bit patterns (cast inside the graph, or converted
 * here); their means are taken of the stored values and their non-finite count is that of the stored
 * bits (exponent field all ones), which includes float32 values that overflowed to ±Infinity.
 */
import { featureMeans, type LayoutGeometry } from '../graph/layout.js';
import { fromFloat16Bits } from './float16.js';

/**
 * Counts NaN/±Infinity in `data` (rows × outer × features × inner, element (r, o, f, i) at
 * ((r·O + o)·F + f)·I + i), looking only at the features whose mean in `means` (rows × F) is not finite.
 * @returns the same count a full scan of the data gives.
 */
export function nonFiniteInFeatures(data: Float32Array, rows: number, g: LayoutGeometry, means: Float32Array): number {
  const { outer, features, inner } = g;
  const per = outer * features * inner;
  let count = 0;
  for (let r = 0; r < rows; r++) {
    for (let f = 0; f < features; f++) {
      if (Number.isFinite(means[r * features + f]!)) continue;
      for (let o = 0; o < outer; o++) {
        const start = r * per + (o * features + f) * inner;
        for (let i = 0; i < inner; i++) if (!Number.isFinite(data[start + i]!)) count++;
      }
    }
  }
  return count;
}

/** Channel means and the non-finite count of float32 activations, from one pass over them. */
export function float32Pass(data: Float32Array, rows: number, g: LayoutGeometry): { means: Float32Array; nonFinite: number } {
  const means = g.inner >= 16 ? wideMeans(data, rows, g) : featureMeans(data, rows, g);
  return { means, nonFinite: nonFiniteInFeatures(data, rows, g, means) };
}

/**
 * `featureMeans` for long runs of positions (inner ≥ 16, e.g. the H·W of a feature map): four partial
 * sums in doubles over the run, so that the additions do not wait on each other; the same means up to
 * the rounding of a double sum (relative 2^-50 before the float32 result).
 */
function wideMeans(data: Float32Array, rows: number, g: LayoutGeometry): Float32Array {
  const { outer, features, inner } = g;
  const per = outer * features * inner;
  const inverse = 1 / (outer * inner);
  const out = new Float32Array(rows * features);
  const sums = new Float64Array(features);
  const tail = inner & 3;
  for (let r = 0; r < rows; r++) {
    sums.fill(0);
    // layout: element (r, o, f, i) at r·per + (o·F + f)·I + i
    for (let o = 0; o < outer; o++) {
      const base = r * per + o * features * inner;
      for (let f = 0; f < features; f++) {
        const start = base + f * inner;
        const end = start + inner - tail;
        let s0 = 0;
        let s1 = 0;
        let s2 = 0;
        let s3 = 0;
        for (let i = start; i < end; i += 4) {
          s0 += data[i]!;
          s1 += data[i + 1]!;
          s2 += data[i + 2]!;
          s3 += data[i + 3]!;
        }
        for (let i = end; i < end + tail; i++) s0 += data[i]!;
        sums[f]! += s0 + s1 + (s2 + s3);
      }
    }
    for (let f = 0; f < features; f++) out[r * features + f] = sums[f]! * inverse;
  }
  return out;
}

let halfValues: Float32Array | null = null;

/** The value of every binary16 bit pattern (65 536 entries, built once). */
function halfTable(): Float32Array {
  if (!halfValues) {
    halfValues = new Float32Array(65536);
    for (let bits = 0; bits < 65536; bits++) halfValues[bits] = fromFloat16Bits(bits);
  }
  return halfValues;
}

/**
 * Channel means (of the stored values, summed in doubles) and the count of NaN/±Infinity bit patterns
 * of float16 activations given as bits, in one pass.
 */
export function float16Pass(bits: Uint16Array, rows: number, g: LayoutGeometry): { means: Float32Array; nonFinite: number } {
  const table = halfTable();
  const { outer, features, inner } = g;
  const per = outer * features * inner;
  const means = new Float32Array(rows * features);
  const sums = new Float64Array(features);
  const inverse = 1 / (outer * inner);
  let nonFinite = 0;
  for (let r = 0; r < rows; r++) {
    sums.fill(0);
    // layout: element (r, o, f, i) at r·per + (o·F + f)·I + i
    for (let o = 0; o < outer; o++) {
      const base = r * per + o * features * inner;
      for (let f = 0; f < features; f++) {
        const start = base + f * inner;
        const end = start + inner - (inner & 1);
        let s0 = 0;
        let s1 = 0;
        for (let i = start; i < end; i += 2) {
          s0 += table[bits[i]!]!;
          s1 += table[bits[i + 1]!]!;
        }
        if (inner & 1) s0 += table[bits[end]!]!;
        sums[f]! += s0 + s1;
      }
    }
    for (let f = 0; f < features; f++) {
      means[r * features + f] = sums[f]! * inverse;
      if (Number.isFinite(sums[f]!)) continue;
      for (let o = 0; o < outer; o++) {
        const start = r * per + (o * features + f) * inner;
        for (let i = 0; i < inner; i++) if ((bits[start + i]! & 0x7c00) === 0x7c00) nonFinite++;
      }
    }
  }
  return { means, nonFinite };
}

/** Count of float16 bit patterns in `bits[start, end)` that are NaN or ±Infinity (exponent field all ones). */
export function countHalfNonFinite(bits: Uint16Array, start = 0, end = bits.length): number {
  let count = 0;
  for (let i = start; i < end; i++) if ((bits[i]! & 0x7c00) === 0x7c00) count++;
  return count;
}

/** Count of NaN/±Infinity among the first `end` values (a plain scan, for when the means come from elsewhere). */
export function countNonFiniteValues(data: Float32Array, end = data.length): number {
  let largest = 0;
  for (let i = 0; i < end; i++) largest = Math.max(largest, Math.abs(data[i]!));
  if (largest < Number.POSITIVE_INFINITY) return 0;
  let count = 0;
  for (let i = 0; i < end; i++) if (!Number.isFinite(data[i]!)) count++;
  return count;
}
