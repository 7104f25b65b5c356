/**
 * compareSchemes: the layer-by-layer tally of two schemes counts only the layers below the sites of
 * both (exact counting on fixture diffs whose relative changes decay below their sites).
 */
import { describe, expect, it } from 'vitest';
import { compareSchemes } from '../../src/compare/diff-verdict.js';
import { makeDiff } from '../report/fixtures.js';

describe('compareSchemes', () => {
  it('at one shared site counts every layer below it, and A and B wins add up to the layers where they differ', () => {
    const a = makeDiff({ site: 2, start: 0.12, rate: -0.35 });
    const b = makeDiff({ site: 2, start: 0.09, rate: -0.2, kind: 'sensitivity' });
    const c = compareSchemes(a, b);
    const below = a.layers.filter((l) => l.belowSite > 0).length;
    expect(below).toBe(a.layers.length - 3);
    const aWins = c.layers.filter((l, i) => a.layers[i]!.belowSite > 0 && l.larger === 'a').length;
    const bWins = c.layers.filter((l, i) => a.layers[i]!.belowSite > 0 && l.larger === 'b').length;
    expect(c.verdict).toContain(`below the site, A changes activity more in ${aWins} of ${below} layers and B in ${bWins}`);
  });

  it('at different sites counts only the layers below the deeper one, and says so', () => {
    const a = makeDiff({ site: 2 });
    const b = makeDiff({ site: 6, kind: 'sensitivity' });
    const c = compareSchemes(a, b);
    const belowBoth = b.layers.filter((l) => l.belowSite > 0).length;
    expect(belowBoth).toBe(b.layers.length - 7);
    expect(c.verdict).toMatch(new RegExp(`^below both schemes' sites, A changes activity more in \\d+ of ${belowBoth} layers`));
    // the same pair the other way round counts the same layers
    expect(compareSchemes(b, a).verdict).toMatch(new RegExp(` of ${belowBoth} layers`));
  });
});
