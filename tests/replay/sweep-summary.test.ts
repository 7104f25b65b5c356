import { describe, expect, it } from 'vitest';
import { summarise, sweepWarnings, type SummaryInput } from '../../src/replay/sweep-summary.js';
import type { SweepCell } from '../../src/replay/sweep-types.js';

const detection = { hitRate: 0.5, falseAlarmRate: 0.2, dPrime: 0.8, criterion: 0, accuracy: 0.65, auc: 0.7 };
function cell(scheme: string, strength: number, category: string, size: number): SweepCell {
  return {
    site: 'conv4', scheme, strength, category, seed: 0, base: detection, mod: detection,
    change: { dPrime: 0.1, criterion: 0, hitRatePp: 1, falseAlarmRatePp: 0, accuracyPp: 1, auc: 0.01, matchedHitRatePp: 1 },
    criterionControl: { shift: 0, hitRatePp: 0, dPrime: 0 }, siteActivityChange: size,
  };
}
const input = (schemes: SummaryInput['schemes']): SummaryInput => ({
  model: { fileName: 'net.onnx', sha256: 'x' } as SummaryInput['model'], baseline: { folder: 'base' } as SummaryInput['baseline'],
  sites: ['conv4'], schemes, strengths: [0, 0.4], categories: ['a', 'b'], controlSeeds: [], match: null, matchText: undefined, measure: 'auc',
});

describe('summarise', () => {
  it('summarise says schemes at one strength are not size-matched when their site activity changes differ by more than 5 %, and points to sonde size-matched', () => {
    const cells = [cell('tuning', 0, 'a', 0), cell('sensitivity', 0, 'a', 0), cell('tuning', 0.4, 'a', 0.24), cell('tuning', 0.4, 'b', 0.246), cell('sensitivity', 0.4, 'a', 0.27), cell('sensitivity', 0.4, 'b', 0.274)];
    const result = summarise(cells, input(['tuning', 'sensitivity']));
    expect(result.summary).toMatch(/not size-matched: at conv4, β 0\.4, site activity changed by 24\.3 % with tuning vs 27\.2 % with sensitivity/);
    expect(result.summary).toContain('sonde size-matched');
  });

  it('summarise adds no size note when the schemes changed the site by about the same amount', () => {
    const cells = [cell('tuning', 0.4, 'a', 0.25), cell('sensitivity', 0.4, 'a', 0.255)];
    expect(summarise(cells, input(['tuning', 'sensitivity'])).summary).not.toMatch(/size-matched/);
  });
});


/** A cell whose ROC-area change is `auc` in every resample shifted by `spread` steps (draws auc − spread … auc + spread). */
function drawnCell(strength: number, category: string, auc: number, spread: number): SweepCell {
  const draws = Array.from({ length: 41 }, (_, r) => auc + spread * (r - 20) / 20);
  return {
    site: 's', scheme: 'tuning', strength, category, seed: 0, base: detection, mod: detection,
    change: { dPrime: 0, criterion: 0, hitRatePp: 0, falseAlarmRatePp: 0, accuracyPp: 0, auc, matchedHitRatePp: 0, aucDraws: draws, dPrimeDraws: draws.map(() => 0) },
    criterionControl: { shift: 0, hitRatePp: 0, dPrime: 0 },
    siteActivityChange: strength / 4,
  };
}

function inputWith(labels: string[][], categories: string[]): SummaryInput {
  return {
    model: { fileName: 'm.onnx', sha256: 'x' } as SummaryInput['model'],
    baseline: { folder: 'snapshots/base', stimuli: { labels } } as unknown as SummaryInput['baseline'],
    sites: ['s'], schemes: ['tuning'], strengths: [0, 0.5, 1], categories, controlSeeds: [], match: null, matchText: undefined, measure: 'auc',
  };
}

describe('summarise best cells', () => {
  const labels = Array.from({ length: 20 }, (_, i) => [i % 2 === 0 ? 'a' : 'b']);

  it('summarise picks no best cell when no non-zero strength has an interval above 0, and never strength 0', () => {
    // strength 0 "wins" on the mean (0 > −0.01) but is not a modulation; 0.5 and 1 lower the area
    const cells = ['a', 'b'].flatMap((c) => [drawnCell(0, c, 0, 0), drawnCell(0.5, c, -0.01, 0.005), drawnCell(1, c, -0.02, 0.005)]);
    const result = summarise(cells, inputWith(labels, ['a', 'b']));
    expect(result.best[0]!.scheme).toBe('none');
    expect(result.summary).toContain('largest gain in detection by ROC area (threshold-free): none');
  });

  it('summarise picks the largest mean among non-zero strengths with an interval above 0, and gives that interval', () => {
    // strength 1 has the larger mean but its interval reaches below 0; 0.5 is smaller and clear of 0
    const cells = ['a', 'b'].flatMap((c) => [drawnCell(0, c, 0, 0), drawnCell(0.5, c, 0.02, 0.01), drawnCell(1, c, 0.03, 0.05)]);
    const result = summarise(cells, inputWith(labels, ['a', 'b']));
    expect(result.best[0]!.strength).toBe(0.5);
    // 41 draws from 0.01 to 0.03: the 2.5 % and 97.5 % points are the second and the second-to-last (linear rule)
    expect(result.best[0]!.ci![0]).toBeCloseTo(0.0105, 12);
    expect(result.best[0]!.ci![1]).toBeCloseTo(0.0295, 12);
    expect(result.summary).toContain('strength 0.5, ΔAUC +0.020 [');
  });
});

describe('sweepWarnings', () => {
  it('sweepWarnings names categories held by under 20 % (or over 80 %) of the displays and a sign-flip test that cannot reach p < 0.05', () => {
    // 16 of 200 hold "ring", as in detect:all on a set cued for another kind
    const labels = Array.from({ length: 200 }, (_, i) => (i < 16 ? ['ring'] : i < 116 ? ['disc'] : ['bar']));
    const warnings = sweepWarnings(inputWith(labels, ['ring', 'disc', 'bar']), 3);
    expect(warnings[0]).toContain('unbalanced cued category: ring in 16 of 200 displays');
    // exact sign-flip test over k categories: the smallest p is 2^−k (Fisher 1935's enumeration), 0.125 for 3
    expect(warnings[1]).toContain('the tuning-vs-shuffled test across 3 cued categories cannot reach p < 0.05: its smallest possible p is 0.125');
    expect(sweepWarnings(inputWith(labels.slice(16), ['disc', 'bar']), 5)).toEqual([]);
    expect(sweepWarnings(inputWith(labels, ['ring']), 1)[1]).toContain('across 1 cued category cannot');
  });
});
