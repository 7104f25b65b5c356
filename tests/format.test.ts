/**
 * Terminal number formatting. Exact properties of the rounding rule (Number.prototype.toFixed, ECMA-262).
 */
import { describe, expect, it } from 'vitest';
import { compact, csvField, fixed, signed } from '../src/format.js';
import { sgn } from '../src/report/html/tables.js';

describe('signed', () => {
  it('signed(value, digits) prints the sign of the rounded value, so nothing prints as "-0.0"', () => {
    expect(signed(0.42)).toBe('+0.42');
    expect(signed(-1.3)).toBe('-1.30');
    expect(signed(-0.04, 1)).toBe('+0.0'); // rounds to zero
    expect(signed(-0, 2)).toBe('+0.00');
    expect(signed(-0.06, 1)).toBe('-0.1');
    expect(signed(Number.NaN)).toBe('–');
    expect(signed(Number.NEGATIVE_INFINITY)).toBe('-∞');
  });

  it('signed agrees with the HTML report\'s sgn except for the minus sign it uses (ASCII in terminals, U+2212 in HTML)', () => {
    for (const x of [-2.5, -0.004, 0, 0.004, 0.126, 3]) expect(signed(x).replace('-', '−')).toBe(sgn(x));
  });
});

describe('fixed, compact, csvField', () => {
  it('fixed and compact print NaN as "–"; csvField leaves it empty and quotes per RFC 4180', () => {
    expect(fixed(Number.NaN)).toBe('–');
    expect(compact(0)).toBe('0');
    expect(compact(0.000123)).toBe('1.23e-4');
    expect(csvField(Number.NaN)).toBe('');
    expect(csvField('a,"b"')).toBe('"a,""b"""');
  });
});
