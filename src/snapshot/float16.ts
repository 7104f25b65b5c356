/**
 * IEEE 754 binary16 conversion. float32 → float16 rounds to nearest, ties to even, with overflow to
 * ±Infinity, subnormals kept and NaN preserved (as a quiet NaN).
 */

const f32 = new Float32Array(1);
const u32 = new Uint32Array(f32.buffer);

/** Converts one float32 value to float16 bits. */
export function toFloat16Bits(value: number): number {
  f32[0] = value;
  const x = u32[0]!;
  const sign = (x >>> 16) & 0x8000;
  const exponent = (x >>> 23) & 0xff;
  let mantissa = x & 0x7fffff;
  if (exponent === 0xff) return sign | 0x7c00 | (mantissa !== 0 ? 0x200 : 0); // Inf or NaN
  const e = exponent - 127 + 15;
  if (e >= 0x1f) return sign | 0x7c00; // overflow → Inf
  if (e <= 0) {
    if (e < -10) return sign; // underflow → ±0
    mantissa |= 0x800000; // implicit leading one
    const shift = 14 - e;
    const half = 1 << (shift - 1);
    let result = mantissa >>> shift;
    const rest = mantissa & ((1 << shift) - 1);
    if (rest > half || (rest === half && (result & 1) === 1)) result += 1;
    return sign | result;
  }
  let result = (e << 10) | (mantissa >>> 13);
  const rest = mantissa & 0x1fff;
  if (rest > 0x1000 || (rest === 0x1000 && (result & 1) === 1)) result += 1; // may carry into the exponent: correct
  return sign | result;
}

/** Converts float16 bits to a number. */
export function fromFloat16Bits(bits: number): number {
  const sign = bits & 0x8000 ? -1 : 1;
  const exponent = (bits >>> 10) & 0x1f;
  const mantissa = bits & 0x3ff;
  if (exponent === 0) return sign * mantissa * 2 ** -24;
  if (exponent === 0x1f) return mantissa === 0 ? sign * Infinity : NaN;
  return sign * (1 + mantissa / 1024) * 2 ** (exponent - 15);
}

/** Converts a float32 array to float16 bits into `out` (allocated when omitted). */
export function float32ToFloat16(values: Float32Array, out: Uint16Array = new Uint16Array(values.length)): Uint16Array {
  for (let i = 0; i < values.length; i++) out[i] = toFloat16Bits(values[i]!);
  return out;
}

/** Converts float16 bits to float32 into `out` (allocated when omitted). */
export function float16ToFloat32(bits: Uint16Array, out: Float32Array = new Float32Array(bits.length)): Float32Array {
  for (let i = 0; i < bits.length; i++) out[i] = fromFloat16Bits(bits[i]!);
  return out;
}
