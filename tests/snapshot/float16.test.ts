import { describe, expect, it } from 'vitest';
import { float16ToFloat32, float32ToFloat16, fromFloat16Bits, toFloat16Bits } from '../../src/snapshot/float16.js';
import { createRandom } from '../../src/random.js';

// Bit patterns from IEEE 754-2008 binary16: 1.0 = 0x3C00, largest normal 65504 = 0x7BFF,
// smallest subnormal 2^-24 = 0x0001, smallest normal 2^-14 = 0x0400, -2 = 0xC000, +Inf = 0x7C00.
describe('toFloat16Bits', () => {
  it('toFloat16Bits(x) gives the IEEE 754 binary16 patterns of reference values', () => {
    expect(toFloat16Bits(1)).toBe(0x3c00);
    expect(toFloat16Bits(65504)).toBe(0x7bff);
    expect(toFloat16Bits(2 ** -24)).toBe(0x0001);
    expect(toFloat16Bits(2 ** -14)).toBe(0x0400);
    expect(toFloat16Bits(-2)).toBe(0xc000);
    expect(toFloat16Bits(Infinity)).toBe(0x7c00);
    expect(toFloat16Bits(1e6)).toBe(0x7c00); // overflow → +Inf
    expect(toFloat16Bits(0)).toBe(0);
    expect(fromFloat16Bits(toFloat16Bits(NaN))).toBeNaN();
  });

  it('toFloat16Bits(x) rounds half to even (1 + 2^-11 is a tie between 1 and 1 + 2^-10)', () => {
    expect(toFloat16Bits(1 + 2 ** -11)).toBe(0x3c00);
    expect(toFloat16Bits(1 + 3 * 2 ** -11)).toBe(0x3c02);
  });
});

describe('float32ToFloat16', () => {
  it('float32ToFloat16 then float16ToFloat32 keeps values within half a float16 ulp (relative 2^-11)', () => {
    const rng = createRandom(7);
    const values = new Float32Array(10000).map(() => (rng.uniform() - 0.5) * 2 * 10 ** (rng.uniform() * 8 - 4));
    const back = float16ToFloat32(float32ToFloat16(values));
    for (let i = 0; i < values.length; i++) {
      const v = values[i]!;
      if (Math.abs(v) < 2 ** -14) expect(Math.abs(back[i]! - v)).toBeLessThanOrEqual(2 ** -25);
      else expect(Math.abs(back[i]! - v) / Math.abs(v)).toBeLessThanOrEqual(2 ** -11);
    }
  });

  it('float16ToFloat32(float32ToFloat16(x)) is exact for every finite float16 value', () => {
    for (let bits = 0; bits < 0x10000; bits++) {
      const value = fromFloat16Bits(bits);
      if (!Number.isFinite(value)) continue;
      expect(toFloat16Bits(value)).toBe(value === 0 && bits === 0x8000 ? 0x8000 : bits);
    }
  });
});
