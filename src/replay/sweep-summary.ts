/**
 * The summary of a sweep's cells: the best cell per site in the ranking measure, calibration of the
 * strength that reaches a target change, and the sign-flip test of tuning-based gain against the shuffled
 * control across categories.
 */
import { signFlipTest } from '../analysis/sign-flip.js';
import type { LoadedModel } from '../graph/load-model.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { signed } from '../format.js';
import { sizeGapNote, sizeGaps } from '../compare/size-match.js';
import type { MatchTarget, SweepBest, SweepCalibration, SweepCell, SweepMeasure, SweepResult, SweepScheme } from './sweep-types.js';

/**
 * Rule-of-thumb band of attention-related firing-rate changes (5–30 %; from memory, see
 * shared DOMAIN notes). Calibrated strengths are reported against it.
 */
export const ATTENTION_BAND = { low: 0.05, high: 0.3, source: 'typical attention-related firing-rate changes, roughly 5–30 % (from memory; DOMAIN notes)' };

/** The change of a cell in the ranking measure. */
function changeIn(measure: SweepMeasure): (c: SweepCell) => number {
  return measure === 'auc' ? (c) => c.change.auc : (c) => c.change.dPrime;
}

/** The sweep's axes and choices the summary needs. */
export interface SummaryInput {
  model: LoadedModel;
  baseline: Snapshot;
  sites: string[];
  schemes: SweepScheme[];
  strengths: readonly number[];
  categories: string[];
  controlSeeds: number[];
  match: MatchTarget | null;
  matchText: string | undefined;
  measure: SweepMeasure;
}

/** Mean over categories (and control seeds) of a cell measure, per site × scheme × strength. */
function curve(cells: readonly SweepCell[], site: string, scheme: string, strengths: readonly number[], pick: (c: SweepCell) => number): number[] {
  return strengths.map((strength) => {
    const chosen = cells.filter((c) => c.site === site && c.scheme === scheme && c.strength === strength);
    return chosen.length === 0 ? Number.NaN : chosen.reduce((s, c) => s + pick(c), 0) / chosen.length;
  });
}

/**
 * The summary of a sweep: best cells, calibration, the control test and the summary text.
 * @param cells every cell of the sweep; input the sweep's axes, measure and match target.
 */
export function summarise(cells: SweepCell[], input: SummaryInput): SweepResult {
  const strengths = [...input.strengths];
  const rankBy = (b: SweepBest): number => (input.measure === 'auc' ? b.aucChange : b.dPrimeChange);
  const best: SweepBest[] = input.sites.map((site) => {
    let top: SweepBest | null = null;
    for (const scheme of input.schemes.filter((s) => s !== 'shuffled')) {
      const dp = curve(cells, site, scheme, strengths, (c) => c.change.dPrime);
      const auc = curve(cells, site, scheme, strengths, (c) => c.change.auc);
      const acc = curve(cells, site, scheme, strengths, (c) => c.change.accuracyPp);
      const act = curve(cells, site, scheme, strengths, (c) => c.siteActivityChange);
      dp.forEach((_, i) => {
        const candidate: SweepBest = { site, scheme, strength: strengths[i]!, dPrimeChange: dp[i]!, aucChange: auc[i]!, accuracyPp: acc[i]!, siteActivityChange: act[i]! };
        if (Number.isFinite(rankBy(candidate)) && (top === null || rankBy(candidate) > rankBy(top))) top = candidate;
      });
    }
    return top ?? { site, scheme: input.schemes[0] ?? 'none', strength: Number.NaN, dPrimeChange: Number.NaN, aucChange: Number.NaN, accuracyPp: Number.NaN, siteActivityChange: Number.NaN };
  });
  const calibration: SweepCalibration[] = [];
  if (input.match) {
    const order = strengths.map((s, i) => ({ s, i })).sort((a, b) => Math.abs(a.s) - Math.abs(b.s));
    for (const site of input.sites) {
      for (const scheme of input.schemes) {
        const measure = curve(cells, site, scheme, strengths, (c) => c.change[input.match!.measure]);
        const activity = curve(cells, site, scheme, strengths, (c) => c.siteActivityChange);
        let strength: number | null = null;
        let implied: number | null = null;
        // walk strengths by size; interpolate linearly between the last point below and the first reaching the target
        for (let j = 0; j < order.length; j++) {
          const here = measure[order[j]!.i]!;
          if (!(here >= input.match.value)) continue;
          if (j === 0) {
            strength = order[0]!.s;
            implied = activity[order[0]!.i]!;
          } else {
            const prev = order[j - 1]!;
            const before = measure[prev.i]!;
            const t = Number.isFinite(before) && here !== before ? (input.match.value - before) / (here - before) : 1;
            strength = prev.s + t * (order[j]!.s - prev.s);
            implied = activity[prev.i]! + t * (activity[order[j]!.i]! - activity[prev.i]!);
          }
          break;
        }
        calibration.push({ site, scheme, target: input.matchText!, strength, siteActivityChange: implied, withinBand: implied === null ? null : implied >= ATTENTION_BAND.low && implied <= ATTENTION_BAND.high });
      }
    }
  }
  let control: SweepResult['control'] = null;
  if (input.schemes.includes('tuning') && input.schemes.includes('shuffled')) {
    // per category: mean over sites and non-zero strengths of (tuning change − mean shuffled change), in the measure
    const differences: number[] = [];
    let meanTuning = 0;
    let meanShuffled = 0;
    const change = changeIn(input.measure);
    for (const category of input.categories) {
      const pick = (scheme: string) => cells.filter((c) => c.category === category && c.scheme === scheme && c.strength !== 0 && Number.isFinite(change(c)));
      const t = pick('tuning');
      const s = pick('shuffled');
      if (t.length === 0 || s.length === 0) continue;
      const mt = t.reduce((a, c) => a + change(c), 0) / t.length;
      const ms = s.reduce((a, c) => a + change(c), 0) / s.length;
      meanTuning += mt;
      meanShuffled += ms;
      differences.push(mt - ms);
    }
    if (differences.length > 0) {
      const test = signFlipTest(differences);
      control = { meanTuning: meanTuning / differences.length, meanShuffled: meanShuffled / differences.length, difference: test.mean, pValue: test.pValue, test: `paired sign-flip test across ${differences.length} cued categories (one-sided, ${test.exact ? 'exact' : 'Monte Carlo'})`, measure: input.measure };
    }
  }
  const lines: string[] = [];
  const ranked = [...best].filter((b) => Number.isFinite(rankBy(b))).sort((a, b) => rankBy(b) - rankBy(a));
  const measureName = input.measure === 'auc' ? 'ROC area (threshold-free)' : 'd′ at the fixed threshold';
  const symbol = input.measure === 'auc' ? 'ΔAUC' : 'Δd′';
  if (ranked[0]) lines.push(`largest gain in detection by ${measureName}: ${ranked[0].scheme} at ${ranked[0].site}, strength ${ranked[0].strength}, AUC ${signed(ranked[0].aucChange, 3)}, d′ ${signed(ranked[0].dPrimeChange)} (${signed(ranked[0].accuracyPp, 1)} pp), site activity changed by ${(100 * ranked[0].siteActivityChange).toFixed(1)} %`);
  if (control) lines.push(`tuning-based gain vs shuffled control by ${measureName}: mean ${symbol} ${control.meanTuning.toFixed(3)} vs ${control.meanShuffled.toFixed(3)}, p = ${control.pValue.toPrecision(2)} (${control.test})`);
  for (const c of calibration.filter((x) => x.strength !== null)) lines.push(`${c.target} at ${c.site} with ${c.scheme}: strength ${c.strength!.toFixed(3)}, site activity ${(100 * c.siteActivityChange!).toFixed(1)} % (${c.withinBand ? 'inside' : 'outside'} the ${100 * ATTENTION_BAND.low}–${100 * ATTENTION_BAND.high} % band)`);
  // equal strength is not equal size: say so when the schemes' site activity changes differ
  const sizeNote = sizeGapNote(sizeGaps(cells.map((c) => ({ site: c.site, scheme: c.scheme, strength: c.strength, size: c.siteActivityChange }))), 'site activity changed by');
  if (sizeNote) lines.push(sizeNote);
  return {
    kind: 'sweep',
    model: { file: input.model.fileName, sha256: input.model.sha256 },
    baseline: input.baseline.folder,
    sites: input.sites,
    schemes: input.schemes,
    strengths,
    categories: input.categories,
    controlSeeds: input.schemes.includes('shuffled') ? input.controlSeeds : [],
    cells,
    measure: input.measure,
    best,
    calibration,
    band: ATTENTION_BAND,
    control,
    summary: lines.join('\n'),
  };
}
