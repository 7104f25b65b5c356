/**
 * The report's per-run summary table describes a depth profile with the same rule as the command line's
 * verdict (describeDepthProfile): flat when the fitted change over the layers below the site is under
 * 5 %, else the half- or doubling depth ln 2 / |rate| (exact property of an exponential profile).
 */
import { describe, expect, it } from 'vitest';
import { describeDepthProfile } from '../../src/compare/diff-verdict.js';
import { bestCellsTable, diffSummaryTable, sweepMeasureOf, sweepTaskTable, taskTable } from '../../src/report/html/tables.js';
import { taskCurves } from '../../src/report/html/chart-data.js';
import { makeDiff, makeSweep } from './fixtures.js';

const summary = (rate: number) => {
  const diff = makeDiff({ rate });
  return { html: diffSummaryTable([{ label: 'run', diff }]).toString(), cli: describeDepthProfile(diff) };
};

describe('diffSummaryTable depth profile', () => {
  it('diffSummaryTable: a decaying profile halves every ln 2 / |rate| layers, as the verdict says', () => {
    const { html, cli } = summary(-0.35);
    expect(html).toContain(`halves every ${(Math.LN2 / 0.35).toFixed(1)} weight layers`);
    expect(cli).toContain(`halves every ${(Math.LN2 / 0.35).toFixed(1)} weight layers`);
  });

  it('diffSummaryTable: a growing profile doubles every ln 2 / rate layers', () => {
    const { html, cli } = summary(0.2);
    expect(html).toContain(`doubles every ${(Math.LN2 / 0.2).toFixed(1)} weight layers`);
    expect(cli).toContain(`doubles every ${(Math.LN2 / 0.2).toFixed(1)} weight layers`);
  });

  it('diffSummaryTable: a rate whose change over the 9 layers below the site is under 5 % keeps its size in both texts', () => {
    // 0.005 · 9 = 0.045 < 0.05, although ln 2 / 0.005 = 139 layers would read as a doubling depth
    const { html, cli } = summary(0.005);
    expect(html).toContain('keeps its size (within 5 % over 9 weight layers)');
    expect(cli).toContain('keeps its size below');
    expect(html).not.toContain('doubles');
  });
});

describe('detection tables name their measure', () => {
  it('taskTable shows the ROC area, its interval, the matched hit rate and the criterion-shift control', () => {
    const diff = makeDiff();
    const text = taskTable(diff.task!).toString();
    const c = diff.task!.categories[0]!;
    expect(text).toContain(`${c.auc.base.toFixed(3)} → ${c.auc.mod.toFixed(3)}`);
    expect(text).toContain(`+${c.auc.change.toFixed(3)} [${c.auc.ci![0].toFixed(3)}, ${c.auc.ci![1].toFixed(3)}]`);
    expect(text).toContain(`+${c.matchedHitRatePp.toFixed(1)} pp`);
    expect(text).toContain('criterion shift only');
    expect(diff.verdict).toMatch(/^.*detection by ROC area \(threshold-free\) \+0\.040 \[0\.010, 0\.070\]/);
  });

  it('bestCellsTable and sweepTaskTable rank by the sweep measure; a sweep without one was ranked by d′', () => {
    const sweep = makeSweep({ depthProfile: false });
    expect(bestCellsTable(sweep).toString()).toContain('best by ROC area (threshold-free)');
    expect(sweepTaskTable(taskCurves(sweep), 'auc').toString()).toContain('best strength (by ΔAUC)');
    const { measure: _omitted, ...old } = sweep;
    expect(sweepMeasureOf(old as typeof sweep)).toBe('dprime');
    expect(bestCellsTable(old as typeof sweep).toString()).toContain('best by d′ at the fixed threshold');
  });
});
