/**
 * The report's per-run summary table describes a depth profile with the same rule as the command line's
 * verdict (describeDepthProfile): flat when the fitted change over the layers below the site is under
 * 5 %, else the half- or doubling depth ln 2 / |rate| (exact property of an exponential profile).
 */
import { describe, expect, it } from 'vitest';
import { describeDepthProfile } from '../../src/pipeline/diff-snapshots.js';
import { diffSummaryTable } from '../../src/report/html/tables.js';
import { makeDiff } from './fixtures.js';

const summary = (rate: number) => {
  const diff = makeDiff({ rate });
  return { html: diffSummaryTable([{ label: 'run', diff }]).toString(), cli: describeDepthProfile(diff) };
};

describe('diffSummaryTable depth profile', () => {
  it('diffSummaryTable: a decaying profile halves every ln 2 / |rate| layers, as the verdict says', () => {
    const { html, cli } = summary(-0.35);
    expect(html).toContain(`halves every ${(Math.LN2 / 0.35).toFixed(1)} layers`);
    expect(cli).toContain(`halves every ${(Math.LN2 / 0.35).toFixed(1)} layers`);
  });

  it('diffSummaryTable: a growing profile doubles every ln 2 / rate layers', () => {
    const { html, cli } = summary(0.2);
    expect(html).toContain(`doubles every ${(Math.LN2 / 0.2).toFixed(1)} layers`);
    expect(cli).toContain(`doubles every ${(Math.LN2 / 0.2).toFixed(1)} layers`);
  });

  it('diffSummaryTable: a rate whose change over the 9 layers below the site is under 5 % keeps its size in both texts', () => {
    // 0.005 · 9 = 0.045 < 0.05, although ln 2 / 0.005 = 139 layers would read as a doubling depth
    const { html, cli } = summary(0.005);
    expect(html).toContain('keeps its size (within 5 % over 9 layers)');
    expect(cli).toContain('keeps its size below');
    expect(html).not.toContain('doubles');
  });
});
