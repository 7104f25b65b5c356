import { describe, expect, it } from 'vitest';
import { diffSiteSizes, SIZE_TOLERANCE, sizeGapNote, sizeGaps } from '../../src/compare/size-match.js';

describe('sizeGaps', () => {
  it('sizeGaps flags 0.243 vs 0.272 at one strength (10.7 % apart, above 5 %) and names both schemes (arithmetic: (0.272 − 0.243)/0.272)', () => {
    const gaps = sizeGaps([
      { site: 'conv4', scheme: 'tuning', strength: 0.4, size: 0.243 },
      { site: 'conv4', scheme: 'sensitivity', strength: 0.4, size: 0.272 },
    ]);
    expect(gaps).toHaveLength(1);
    expect(gaps[0]!.gap).toBeCloseTo((0.272 - 0.243) / 0.272, 12);
    expect(gaps[0]!.smaller.scheme).toBe('tuning');
    expect(gaps[0]!.larger.scheme).toBe('sensitivity');
    const note = sizeGapNote(gaps, 'site activity changed by')!;
    expect(note).toContain('24.3 %');
    expect(note).toContain('27.2 %');
    expect(note).toContain('β 0.4');
    expect(note).toContain('sonde size-matched');
  });

  it('sizeGaps averages a scheme over categories and leaves gaps within the tolerance, strength 0 and single schemes out', () => {
    const rows = [
      { site: 's', scheme: 'tuning', strength: 0.2, size: 0.10 },
      { site: 's', scheme: 'tuning', strength: 0.2, size: 0.12 },
      { site: 's', scheme: 'uniform', strength: 0.2, size: 0.113 }, // mean 0.11 vs 0.113: 2.7 % apart
      { site: 's', scheme: 'tuning', strength: 0, size: 0 },
      { site: 's', scheme: 'uniform', strength: 0, size: 0.5 },
      { site: 't', scheme: 'tuning', strength: 0.2, size: 0.9 },
    ];
    expect(sizeGaps(rows)).toEqual([]);
    expect(sizeGapNote(sizeGaps(rows), 'x')).toBeNull();
    // the same rows at a tolerance of 1 % do differ
    expect(sizeGaps(rows, 0.01)[0]!.gap).toBeCloseTo((0.113 - 0.11) / 0.113, 12);
    expect(SIZE_TOLERANCE).toBe(0.05);
  });

  it('sizeGaps reports a non-finite size instead of dropping it, first', () => {
    const gaps = sizeGaps([
      { site: 'a', scheme: 'tuning', strength: 0.1, size: 0.1 },
      { site: 'a', scheme: 'uniform', strength: 0.1, size: 0.5 },
      { site: 'b', scheme: 'tuning', strength: 0.1, size: Number.NaN },
      { site: 'b', scheme: 'uniform', strength: 0.1, size: 0.1 },
    ]);
    expect(gaps).toHaveLength(2);
    expect(Number.isNaN(gaps[0]!.gap)).toBe(true);
    expect(sizeGapNote(gaps, 'x')).toContain('not finite');
  });
});

describe('diffSiteSizes', () => {
  const layer = (site: boolean, relativeChange: number) => ({ site, relativeChange }) as never;
  it('diffSiteSizes takes the mean relative change over each diff\'s site layers, and nothing without a recorded site', () => {
    const rows = diffSiteSizes({ sites: ['s1'], layers: [layer(false, 0), layer(true, 0.2), layer(false, 0.1)] }, { sites: ['s1'], layers: [layer(false, 0), layer(true, 0.3), layer(false, 0.2)] });
    expect(rows.map((r) => r.size)).toEqual([0.2, 0.3]);
    expect(sizeGapNote(sizeGaps(rows), 'relative change at the site')).toMatch(/s1, relative change at the site 20\.0 % with A vs 30\.0 % with B/);
    expect(diffSiteSizes({ sites: ['s1'], layers: [layer(false, 0)] }, { sites: ['s1'], layers: [layer(true, 0.3)] })).toEqual([]);
  });
});
