import { describe, expect, it } from 'vitest';
import { summarise, type SummaryInput } from '../../src/replay/sweep-summary.js';
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
