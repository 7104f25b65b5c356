/**
 * The headline's words follow its numbers (exact rules, checked on every sign case): "raises" only when
 * the 95 % interval lies above 0, "lowers" only below, otherwise "does not change … detectably"; "beating
 * its shuffled control" only when the paired tuning − shuffled interval lies above 0; every number quoted
 * is the input's, rounded to three decimals. Inputs are built per case (the rule is the property).
 */
import { describe, expect, it } from 'vitest';
import { CAVEAT_LINE, diffHeadline, sizeMatchedHeadline, sweepHeadline } from '../../src/report/headline.js';
import type { SizeMatchedComparison, SchemeEffect } from '../../src/replay/size-matched.js';
import { makeDiff, makeSweep } from './fixtures.js';

function effect(scheme: string, site: string, estimate: number, low: number, high: number): SchemeEffect {
  return { scheme, site, size: 0.2, aucChange: { estimate, low, high }, fractionOfCeiling: null, hitRatePp: 0, falseAlarmRatePp: 0, fitSetAucChange: null, criterionShiftHitRatePp: 0, perCategory: [] };
}

function comparison(effects: SchemeEffect[], versus: SizeMatchedComparison['versusShuffled']): SizeMatchedComparison {
  return { kind: 'size-matched', fitSet: 'a', heldOutSet: 'b', heldOut: true, size: 0.2, categories: ['disc', 'ring'], resamples: 100, level: 0.95, baseAuc: 0.7, effects, versusShuffled: versus };
}

describe('sizeMatchedHeadline', () => {
  it('sizeMatchedHeadline: picks the scheme row with the largest ΔAUC (never a reference row) and words it by its interval', () => {
    const cases: Array<[number, number, number, RegExp]> = [
      [0.005, 0.001, 0.008, /raises the held-out ROC area of the cued readout by \+0\.005 \[95 % CI \+0\.001, \+0\.008\]/],
      [-0.004, -0.009, -0.001, /lowers the held-out ROC area of the cued readout by -0\.004 \[95 % CI -0\.009, -0\.001\]/],
      [0.002, -0.001, 0.004, /does not change the held-out ROC area of the cued readout detectably \(\+0\.002 \[95 % CI -0\.001, \+0\.004\]\)/],
    ];
    for (const [estimate, low, high, words] of cases) {
      const c = comparison([effect('sensitivity', '/c7/relu/Relu_output_0', estimate, low, high), effect('tuning', '/c7/relu/Relu_output_0', estimate - 0.01, low - 0.01, high - 0.01), effect('ceiling', '/c7/relu/Relu_output_0', 0.5, 0.4, 0.6), effect('shuffled', '/c7/relu/Relu_output_0', 0.3, 0.2, 0.4)], []);
      const text = sizeMatchedHeadline(c).sentences.join(' ');
      expect(text).toMatch(/sensitivity-based gain at \/c7\/relu\/Relu_output_0 does best/);
      expect(text).toMatch(words);
      // the shuffled control is above it: the headline says it is not clearly above
      expect(text).toMatch(/not clearly above the shuffled control's \+0\.300/);
      expect(text).toMatch(/fitted ceiling of the same size reaches \+0\.500/);
    }
  });

  it('sizeMatchedHeadline: "beating its shuffled control" only when the paired difference lies above 0; counts sites where tuning beats it', () => {
    const base = [effect('tuning', 's1', 0.01, 0.005, 0.02), effect('tuning', 's2', 0.002, -0.001, 0.004), effect('shuffled', 's1', 0, -0.001, 0.001), effect('shuffled', 's2', 0, -0.001, 0.001)];
    const above = sizeMatchedHeadline(comparison(base, [{ site: 's1', difference: { estimate: 0.01, low: 0.004, high: 0.016 } }, { site: 's2', difference: { estimate: 0.002, low: -0.002, high: 0.005 } }]));
    expect(above.sentences[0]).toMatch(/, beating its shuffled control \(tuning − shuffled \+0\.010 \[95 % CI \+0\.004, \+0\.016\]\)/);
    expect(above.sentences[1]).toBe('Tuning-based gain beats its shuffled control at 1 of 2 sites (s1).');
    const straddles = sizeMatchedHeadline(comparison(base, [{ site: 's1', difference: { estimate: 0.01, low: -0.001, high: 0.02 } }, { site: 's2', difference: { estimate: -0.01, low: -0.02, high: -0.005 } }]), (s) => s.toUpperCase());
    expect(straddles.sentences[0]).toMatch(/not beating its shuffled control/);
    expect(straddles.sentences[0]).toMatch(/at S1 does best/);
    expect(straddles.sentences[1]).toBe('Tuning-based gain beats its shuffled control at 0 of 2 sites and is below it at 1 (S2).');
  });

  it('sizeMatchedHeadline: no scheme row with a finite change says so', () => {
    expect(sizeMatchedHeadline(comparison([effect('ceiling', 's', 0.1, 0, 0.2)], [])).sentences).toEqual(['The comparison holds no scheme row with a finite ROC-area change.']);
  });
});

describe('diffHeadline and sweepHeadline', () => {
  it('diffHeadline: states survival and the ROC-area change with its interval from the diff', () => {
    const d = makeDiff();
    const text = diffHeadline(d).sentences.join(' ');
    expect(text).toContain(`still above the noise floor at ${d.survival.layer}`);
    const auc = d.task!.auc;
    expect(text).toContain(`${auc.change >= 0 ? '+' : '-'}${Math.abs(auc.change).toFixed(3)} [95 % CI`);
    expect(text).toContain(auc.ci![0] > 0 ? 'raises the ROC area' : auc.ci![1] < 0 ? 'lowers the ROC area' : 'does not change the ROC area');
  });

  it('sweepHeadline: names the best cell by the sweep measure and the control test', () => {
    const s = makeSweep({ depthProfile: false });
    const text = sweepHeadline(s).sentences.join(' ');
    const best = [...s.best].sort((a, b) => b.aucChange - a.aucChange)[0]!;
    if (best.aucChange > 0) expect(text).toContain(`with ${best.scheme} gain at ${best.site}`);
    else expect(text).toContain('No scheme and strength');
    expect(CAVEAT_LINE).toMatch(/not evidence about brains/);
  });
});
