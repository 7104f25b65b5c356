import { describe, expect, it } from 'vitest';
import { agreementData, propagationMatrix, relativeChangeData, runLabel, taskCurves, tuningData, uniqueLabels } from '../../src/report/html/chart-data.js';
import type { SweepCell, SweepResult } from '../../src/replay/sweep-types.js';
import { makeAgreement, makeDiff, makeSweep, makeTuneJson, viaJson } from './fixtures.js';
import type { DiffReport } from '../../src/compare/diff-types.js';
import type { TuningSummaries } from '../../src/report/html/inputs.js';

const detection = { hitRate: 0.5, falseAlarmRate: 0.5, dPrime: 0, criterion: 0, accuracy: 0.5 };

function cell(site: string, scheme: string, strength: number, category: string, seed: number, dPrime: number, accuracyPp = 0, profile?: Array<[string, number, number, number]>): SweepCell {
  return {
    site, scheme, strength, category, seed, base: detection, mod: detection,
    change: { dPrime, criterion: 0, hitRatePp: 0, falseAlarmRatePp: 0, accuracyPp },
    siteActivityChange: 0,
    ...(profile ? { depthProfile: profile.map(([layer, depth, belowSite, relativeChange]) => ({ layer, depth, belowSite, relativeChange, signatureSlope: Number.NaN })) } : {}),
  };
}

function sweepOf(cells: SweepCell[], sites: string[], schemes: string[]): SweepResult {
  const base = makeSweep({ depthProfile: false, strengths: [0] });
  return { ...base, sites, schemes, cells };
}

describe('taskCurves', () => {
  it('taskCurves(sweep) averages d′ change over categories and seeds, and spans the per-seed means', () => {
    // by hand: seed 1 (0.1, 0.3) → 0.2; seed 2 (0.4, 0.6) → 0.5; mean of the four cells 0.35; accuracy (1+3+5+7)/4 = 4
    const cells = [
      cell('s1', 'shuffled', 0.5, 'ring', 1, 0.1, 1),
      cell('s1', 'shuffled', 0.5, 'bar', 1, 0.3, 3),
      cell('s1', 'shuffled', 0.5, 'ring', 2, 0.4, 5),
      cell('s1', 'shuffled', 0.5, 'bar', 2, 0.6, 7),
      cell('s1', 'tuning', 0.5, 'ring', 0, 1.0, 10),
      cell('s1', 'tuning', 0.5, 'bar', 0, 2.0, 20),
    ];
    const points = taskCurves(sweepOf(cells, ['s1'], ['tuning', 'shuffled']));
    expect(points.map((p) => p.scheme)).toEqual(['tuning', 'shuffled']);
    const shuffled = points[1]!;
    expect(shuffled.dPrimeChange).toBeCloseTo(0.35, 12);
    expect(shuffled.low).toBeCloseTo(0.2, 12);
    expect(shuffled.high).toBeCloseTo(0.5, 12);
    expect(shuffled.accuracyPp).toBeCloseTo(4, 12);
    expect(shuffled.cells).toBe(4);
    const tuning = points[0]!;
    expect(tuning.dPrimeChange).toBeCloseTo(1.5, 12);
    expect(tuning.low).toBe(tuning.high); // one seed: no spread
  });

  it('taskCurves(sweep) averages the ROC-area change and matched hit rate the same way, NaN for cells written without them', () => {
    // by hand: seed 1 (0.01, 0.03) → 0.02; seed 2 (0.04, 0.08) → 0.06; mean 0.04; matched hit rate (1+2+3+6)/4 = 3
    const withAuc = (c: SweepCell, auc: number, matched: number): SweepCell => ({ ...c, change: { ...c.change, auc, matchedHitRatePp: matched } });
    const cells = [
      withAuc(cell('s1', 'shuffled', 0.5, 'ring', 1, 0.1), 0.01, 1),
      withAuc(cell('s1', 'shuffled', 0.5, 'bar', 1, 0.3), 0.03, 2),
      withAuc(cell('s1', 'shuffled', 0.5, 'ring', 2, 0.4), 0.04, 3),
      withAuc(cell('s1', 'shuffled', 0.5, 'bar', 2, 0.6), 0.08, 6),
      cell('s1', 'tuning', 0.5, 'ring', 0, 1.0),
    ];
    const [tuning, shuffled] = taskCurves(sweepOf(cells, ['s1'], ['tuning', 'shuffled']));
    expect(shuffled!.aucChange).toBeCloseTo(0.04, 12);
    expect(shuffled!.aucLow).toBeCloseTo(0.02, 12);
    expect(shuffled!.aucHigh).toBeCloseTo(0.06, 12);
    expect(shuffled!.matchedHitRatePp).toBeCloseTo(3, 12);
    expect(tuning!.aucChange).toBeNaN();
  });

  it('taskCurves(sweep) sorts by sweep site order, then scheme order, then strength', () => {
    const cells = [cell('late', 'tuning', 1, 'c', 0, 0), cell('early', 'tuning', 1, 'c', 0, 0), cell('early', 'tuning', 0, 'c', 0, 0), cell('early', 'shuffled', 0, 'c', 1, 0)];
    const order = taskCurves(sweepOf(cells, ['early', 'late'], ['tuning', 'shuffled'])).map((p) => `${p.site}/${p.scheme}/${p.strength}`);
    expect(order).toEqual(['early/tuning/0', 'early/tuning/1', 'early/shuffled/0', 'late/tuning/1']);
  });

  it('taskCurves(sweep) keeps a null d′ change (NaN written by JSON) as a NaN mean, never drops it', () => {
    const cells = viaJson([cell('s', 'tuning', 1, 'a', 0, Number.NaN), cell('s', 'tuning', 1, 'b', 0, 1)]) as SweepCell[];
    const [point] = taskCurves(sweepOf(cells, ['s'], ['tuning']));
    expect(point!.dPrimeChange).toBeNaN();
    expect(point!.cells).toBe(2);
  });
});

describe('propagationMatrix', () => {
  it('propagationMatrix(sweep) shows each scheme at its largest profiled strength, averaged over categories', () => {
    const cells = [
      cell('s', 'tuning', 0.5, 'a', 0, 0, 0, [['s', 4, 0, 0.05], ['next', 6, 1, 0.02]]),
      cell('s', 'tuning', 1, 'a', 0, 0, 0, [['s', 4, 0, 0.1], ['next', 6, 1, 0.04]]),
      cell('s', 'tuning', 1, 'b', 0, 0, 0, [['s', 4, 0, 0.3], ['next', 6, 1, 0.08]]),
      cell('s', 'uniform', 0.25, 'a', 0, 0, 0, [['s', 4, 0, 0.25]]),
      cell('s', 'uniform', 2, 'a', 0, 0), // no profile: does not decide the strength
    ];
    const { cells: matrix, strengthByScheme } = propagationMatrix(sweepOf(cells, ['s'], ['tuning', 'uniform']));
    expect(Object.fromEntries(strengthByScheme)).toEqual({ tuning: 1, uniform: 0.25 });
    expect(matrix.map((m) => [m.scheme, m.layer, m.cells])).toEqual([['tuning', 's', 2], ['tuning', 'next', 2], ['uniform', 's', 1]]);
    expect(matrix[0]!.relativeChange).toBeCloseTo(0.2, 12); // (0.1 + 0.3) / 2
    expect(matrix[1]!.relativeChange).toBeCloseTo(0.06, 12); // (0.04 + 0.08) / 2
    expect(matrix[1]!.belowSite).toBe(1);
  });

  it('propagationMatrix(sweep) is empty for a sweep without depth profiles', () => {
    expect(propagationMatrix(makeSweep({ depthProfile: false })).cells).toEqual([]);
  });
});

describe('relativeChangeData', () => {
  it('relativeChangeData(runs) nulls and counts values a log axis cannot show, and spans whole decades', () => {
    const diff = makeDiff({ site: 2, start: 0.12, rate: -0.35 });
    const data = relativeChangeData([{ label: 'run', diff }]);
    // layers 0 and 1 lie above the site: relative change exactly 0
    expect(data.omitted).toBe(2);
    expect(data.points.filter((p) => p.relativeChange === null).map((p) => p.layer)).toEqual(['input.norm', 'conv1']);
    // smallest drawable: 0.12·e^(−0.35·9) ≈ 5.1e-3 → 1e-3; largest 0.12 → 1
    expect(data.range![0]).toBeCloseTo(1e-3, 15);
    expect(data.range![1]).toBeCloseTo(1, 15);
    // the float32 roundoff floor 4·2⁻²⁴ ≈ 2.4e-7 lies below that range
    expect(data.floorInRange).toBe(false);
    expect(data.floorMax).toBe(4 * 2 ** -24);
    expect(data.points.filter((p) => p.site).map((p) => p.layer)).toEqual(['relu1']);
  });

  it('relativeChangeData(runs) treats JSON nulls (NaN) as not drawable', () => {
    const diff = viaJson(makeDiff()) as DiffReport;
    diff.layers[5]!.relativeChange = null as unknown as number;
    expect(relativeChangeData([{ label: 'r', diff }]).omitted).toBe(3);
  });
});

describe('runLabel and uniqueLabels', () => {
  it('runLabel(diff) names kind, strength, target and site from the manifest, else the folder', () => {
    expect(runLabel(makeDiff({ kind: 'sensitivity', strength: 0.25 }))).toBe('sensitivity 0.25 → ring @ relu1');
    // a window is part of the modulation: the same gain with and without one gets different labels
    const windowed = makeDiff({ kind: 'sensitivity', strength: 0.25 });
    (windowed.mod.modulation as { modulations: Array<Record<string, unknown>> }).modulations[0]!['window'] = { shape: 'gaussian', cx: 0.3, cy: 0.5, sigma: 0.15, outside: 1 };
    expect(runLabel(windowed)).toBe('sensitivity 0.25 → ring @ relu1 in gaussian window at (0.3, 0.5) σ 0.15');
    const bare = { ...makeDiff({ folder: '/x/snapshots/mod-a' }), mod: { folder: '/x/snapshots/mod-a', modulation: null } };
    expect(runLabel(bare)).toBe('mod-a');
  });

  it('uniqueLabels(labels) numbers repeats in order and avoids labels already taken', () => {
    expect(uniqueLabels(['a', 'b', 'a', 'a (2)', 'a'])).toEqual(['a', 'b', 'a (3)', 'a (2)', 'a (4)']);
    expect(uniqueLabels([])).toEqual([]);
  });
});

describe('agreementData and tuningData', () => {
  it('agreementData(agreement) gives r and ρ per layer and the trend line y = intercept + slope·depth at the ends', () => {
    const agreement = makeAgreement();
    const { values, trend } = agreementData(agreement);
    expect(values).toHaveLength(2 * agreement.layers.length);
    // the fixture's pooled r is exactly linear in depth (r = −0.1 + 0.045·(depth − 2)), so the least-squares
    // line passes through its first and last points
    expect(trend![0]!.depth).toBe(2);
    expect(trend![0]!.value).toBeCloseTo(-0.1, 12);
    expect(trend![1]!.depth).toBe(16);
    expect(trend![1]!.value).toBeCloseTo(0.53, 12);
  });

  it('agreementData(agreement) has no trend with fewer than two layers and skips unknown depth (−1)', () => {
    const agreement = makeAgreement();
    agreement.layers = agreement.layers.slice(0, 2);
    agreement.layers[1]!.depth = -1;
    const { values, trend } = agreementData(agreement);
    expect(values.map((v) => v.layer)).toEqual(['conv1', 'conv1']);
    expect(trend).toBeNull();
  });

  it('tuningData(tuning) gives the selective fraction and mean selectivity per layer', () => {
    const tuning = makeTuneJson() as unknown as TuningSummaries;
    const values = tuningData(tuning);
    expect(values).toHaveLength(2 * tuning.layers.length);
    expect(values[0]).toEqual({ layer: 'conv1', depth: 2, measure: 'selective channels (fraction)', value: tuning.layers[0]!.selectiveFraction });
  });
});
