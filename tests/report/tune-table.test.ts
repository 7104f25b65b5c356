/**
 * `tune --against` print-out with many categories (as an ImageNet readout has): beyond 12 categories each
 * layer shows the median, lowest and highest per-category r with their categories (the median of an
 * even count is the mean of the middle two: exact property, checked against a sort), and no line is
 * wider than 80 cells; up to 12 categories each gets a column.
 */
import stringWidth from 'string-width';
import { describe, expect, it } from 'vitest';
import type { TableComparison } from '../../src/compare/compare-tables.js';
import { MAX_CATEGORY_COLUMNS, renderAgreement } from '../../src/report/tune-table.js';

function comparison(categories: number): TableComparison {
  const names = Array.from({ length: categories }, (_, k) => `class${k}`);
  const layer = (name: string, depth: number, shift: number) => ({
    layer: name,
    depth,
    channels: 64,
    byCategory: names.map((category, k) => ({ category, n: 64, pearson: Math.sin(k * 1.7 + shift), spearman: 0 })),
    pooled: { n: 64 * categories, pearson: 0.1 * depth, spearman: 0.1 * depth },
  });
  return { layers: [layer('/features/features.3/conv/conv.0/conv.0.2/Clip_output_0', 3, 0), layer('/features/features.16/Add_output_0', 7, 1)], categories: names, sensitivityScale: 'normalised', unmatched: [], depthTrend: { slope: 0.1, intercept: 0, r: 1, r2: 1, n: 2 } } as unknown as TableComparison;
}

describe('renderAgreement', () => {
  it('renderAgreement: 1000 categories are summarised per layer (median, lowest and highest r with their categories) within 80 columns', () => {
    const c = comparison(1000);
    const text = renderAgreement(c, 'sens.arrow', { width: 80 });
    for (const line of text.split('\n')) expect(stringWidth(line)).toBeLessThanOrEqual(80);
    expect(text).not.toMatch(/r class5\b/);
    for (const l of c.layers) {
      const sorted = [...l.byCategory].sort((a, b) => a.pearson - b.pearson);
      const median = (sorted[499]!.pearson + sorted[500]!.pearson) / 2;
      expect(text).toContain(median.toFixed(2));
      expect(text).toContain(`${sorted[0]!.pearson.toFixed(2)} ${sorted[0]!.category}`);
      expect(text).toContain(`${sorted[999]!.pearson.toFixed(2)} ${sorted[999]!.category}`);
    }
    expect(text).toMatch(/1000 categories: per-category Pearson r summarised/);
  });

  it(`renderAgreement: up to ${MAX_CATEGORY_COLUMNS} categories get one column each, split to fit 80 columns`, () => {
    const text = renderAgreement(comparison(MAX_CATEGORY_COLUMNS), 'sens.arrow', { width: 80 });
    for (const line of text.split('\n')) expect(stringWidth(line)).toBeLessThanOrEqual(80);
    for (let k = 0; k < MAX_CATEGORY_COLUMNS; k++) expect(text).toContain(`r class${k}`);
  });
});
