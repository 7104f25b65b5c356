import { describe, expect, it } from 'vitest';
import { classifyReportInput } from '../../src/report/html/inputs.js';
import { sizeMatchedSection } from '../../src/report/html/size-matched-section.js';
import type { SizeMatchedComparison } from '../../src/replay/size-matched.js';

const effect = (scheme: string, site: string, estimate: number) => ({ scheme, site, size: 0.2, aucChange: { estimate, low: estimate - 0.01, high: estimate + 0.01 }, fractionOfCeiling: null, fitSetAucChange: null, hitRatePp: 1, falseAlarmRatePp: 2, criterionShiftHitRatePp: 0.5, perCategory: [] });
const comparison: SizeMatchedComparison = {
  kind: 'size-matched',
  fitSet: '/a',
  heldOutSet: '/b',
  heldOut: true,
  size: 0.2,
  categories: ['x'],
  resamples: 10,
  level: 0.95,
  baseAuc: 0.7,
  effects: [effect('tuning', '<s1>', 0.01), effect('tuning-all', 's1+s2', -0.02)],
  versusShuffled: [],
};

describe('size-matched report section', () => {
  it('classifyReportInput recognises a size-matched comparison and refuses one without effects', () => {
    expect(classifyReportInput(JSON.parse(JSON.stringify(comparison)), 'c.json')[0]!.kind).toBe('size-matched');
    expect(() => classifyReportInput({ kind: 'size-matched' }, 'c.json')).toThrow(/effects/);
  });

  it('sizeMatchedSection renders one row per effect, escapes names and names several-site rows', () => {
    const section = sizeMatchedSection([{ name: 'c.json', comparison }])!;
    const text = section.body.toString();
    expect(text).toContain('&lt;s1&gt;');
    expect(text).not.toContain('<s1>');
    // several-site rows are named short in the table (the full list in the cell's title and once below it)
    expect(text).toContain('<td title="s1, s2">all 2 sites</td>');
    expect(text).toContain('all 2 sites: s1, s2');
    expect(text).toContain('+0.010 [+0.000, +0.020]');
    expect(sizeMatchedSection([])).toBeNull();
  });
});
