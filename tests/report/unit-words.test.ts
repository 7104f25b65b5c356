/**
 * `unitWords` / `unitCount`: the word a table uses for its layers' units. Exact properties of the rule
 * (a table of one unit uses its word; a mixed table says "unit" and names where the minority units are),
 * and the HTML report's diff and tuning tables wording token layers as features (issue 19: every table
 * says whether it is per channel, per feature or per head).
 */
import { describe, expect, it } from 'vitest';
import { unitCount, unitWords } from '../../src/report/unit-words.js';
import { renderHtmlReport } from '../../src/report/html/html-report.js';
import { makeDiff, makeTuneJson } from './fixtures.js';

describe('unitWords', () => {
  it('unitWords: a table of one unit uses its word, singular and plural, with no note; older rows (no unit) are channels', () => {
    expect(unitWords(['features', 'features'])).toEqual({ one: 'feature', many: 'features', note: '' });
    expect(unitWords(['heads'])).toEqual({ one: 'head', many: 'heads', note: '' });
    expect(unitWords([undefined, 'channels'])).toEqual({ one: 'channel', many: 'channels', note: '' });
    expect(unitWords([])).toEqual({ one: 'channel', many: 'channels', note: '' });
  });

  it('unitWords: a mixed table says "unit" and names the layers of the rarer units (few by label, many by count)', () => {
    const words = unitWords(['features', 'features', 'features', 'channels'], ['a', 'b', 'c', 'logits']);
    expect(words.one).toBe('unit');
    expect(words.many).toBe('units');
    expect(words.note).toBe('units: channels (of feature maps and vectors) at logits; features (of token tensors, over all tokens) elsewhere');
    const many = unitWords(['channels', 'channels', 'channels', 'channels', 'channels', 'features', 'features', 'features', 'features'], 'abcdefghi'.split(''));
    expect(many.note).toBe('units: features (of token tensors, over all tokens) at 4 layers; channels (of feature maps and vectors) elsewhere');
    expect(unitWords(['features', 'heads']).note).toMatch(/^units: .*heads.*features|^units: .*features.*heads/);
  });

  it('unitCount: a bare number in a table of one unit, with its word in a mixed one', () => {
    expect(unitCount(768, 'features', unitWords(['features']))).toBe('768');
    const mixed = unitWords(['features', 'channels']);
    expect(unitCount(768, 'features', mixed)).toBe('768 features');
    expect(unitCount(1000, undefined, mixed)).toBe('1000 channels');
  });
});

describe('renderHtmlReport (unit words)', () => {
  it('renderHtmlReport: a diff of token layers has a "feature ratio" column over features; a mixed one says "unit ratio" and which is which', async () => {
    const diff = makeDiff();
    const tokens = { ...diff, layers: diff.layers.map((l) => ({ ...l, unit: 'features' as const })) };
    const page = await renderHtmlReport([tokens]);
    expect(page.includes('<th class="num">feature ratio</th>')).toBe(true);
    expect(page.includes('mean ± sd over features')).toBe(true);
    expect(page.includes('channel ratio</th>') || page.includes('over channels')).toBe(false);
    const mixed = { ...diff, layers: diff.layers.map((l, i) => ({ ...l, unit: i === diff.layers.length - 1 ? ('channels' as const) : ('features' as const) })) };
    const other = await renderHtmlReport([mixed]);
    expect(other.includes('<th class="num">unit ratio</th>')).toBe(true);
    expect(/units: channels \(of feature maps and vectors\) at logits; features \(of token tensors, over all tokens\) elsewhere/.test(other)).toBe(true);
  });

  it('renderHtmlReport: a tuning summary of token layers counts features, not channels', async () => {
    const tune = makeTuneJson(false, false) as { layers: Array<Record<string, unknown>> };
    const page = await renderHtmlReport([{ ...tune, layers: tune.layers.map((l) => ({ ...l, unit: 'features' })) }]);
    expect(page.includes('selective features')).toBe(true);
    expect(/<th[^>]*>features<\/th>/.test(page)).toBe(true);
    expect(/<th[^>]*>channels<\/th>/.test(page)).toBe(false);
  });
});
