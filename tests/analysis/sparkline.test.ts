import { describe, expect, it } from 'vitest';
import { sparkline } from '../../src/analysis/sparkline.js';

describe('sparkline', () => {
  it('sparkline(values) maps min to ▁, max to █ and steps of (max − min)/7 to successive bars', () => {
    // Block elements U+2581…U+2588 (Unicode standard, "Block Elements" chart), one per 1/7 of the range.
    expect(sparkline([0, 1, 2, 3, 4, 5, 6, 7])).toBe('▁▂▃▄▅▆▇█');
    expect(sparkline([70, 0, 35])).toBe('█▁▅'); // 35/70·7 = 3.5 rounds to level 4 (▅)
    expect(sparkline([0, 1, 2, 3, 4, 5, 6, 7]).codePointAt(0)).toBe(0x2581);
  });

  it('sparkline(values) draws NaN as a gap, infinities at the ends and flat series mid-height', () => {
    expect(sparkline([0, Number.NaN, 7])).toBe('▁ █');
    expect(sparkline([Number.NEGATIVE_INFINITY, 3, 5, Number.POSITIVE_INFINITY])).toBe('▁▁██');
    expect(sparkline([2, 2, 2])).toBe('▄▄▄');
    expect(sparkline([Number.NaN])).toBe(' ');
    expect(sparkline([])).toBe('');
  });

  it('sparkline(values, { min, max }) uses a fixed scale and clamps outside it', () => {
    expect(sparkline([0.5, 1, -3, 9], { min: 0, max: 1 })).toBe('▅█▁█');
    expect(sparkline([0.5], { min: 0 })).toBe('█'); // max taken from the data
    expect(sparkline([0.5], { min: 1, max: 1 })).toBe('▄'); // an empty scale draws flat
  });
});
