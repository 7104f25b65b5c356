/**
 * The summary of a sweep's cells: the best cell per site in the ranking measure, calibration of the
 * strength that reaches a target change, and the sign-flip test of tuning-based gain against the shuffled
 * control across categories.
 */
import { signFlipTest } from '../stats/sign-flip.js';
import type { LoadedModel } from '../graph/load-model.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { signed } from '../format.js';
import { sizeGapNote, sizeGaps } from '../compare/size-match.js';
import { meanDraws, percentileInterval } from './sweep-intervals.js';
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
  // the best cell of a site: the largest mean change over cued categories among non-zero strengths whose
  // 95 % interval (shared resamples, sweep-intervals.ts) lies above 0; "none" when no cell qualifies
  const drawsOf = (c: SweepCell): number[] | undefined => {
    const d = input.measure === 'auc' ? c.change.aucDraws : c.change.dPrimeDraws;
    return d?.map((v) => (typeof v === 'number' ? v : Number.NaN));
  };
  const best: SweepBest[] = input.sites.map((site) => {
    let top: SweepBest | null = null;
    for (const scheme of input.schemes.filter((s) => s !== 'shuffled')) {
      const dp = curve(cells, site, scheme, strengths, (c) => c.change.dPrime);
      const auc = curve(cells, site, scheme, strengths, (c) => c.change.auc);
      const acc = curve(cells, site, scheme, strengths, (c) => c.change.accuracyPp);
      const act = curve(cells, site, scheme, strengths, (c) => c.siteActivityChange);
      dp.forEach((_, i) => {
        if (strengths[i] === 0) return;
        const group = cells.filter((c) => c.site === site && c.scheme === scheme && c.strength === strengths[i]);
        const mean = meanDraws(group.map(drawsOf));
        const ci = mean ? percentileInterval(mean) : null;
        const candidate: SweepBest = { site, scheme, strength: strengths[i]!, dPrimeChange: dp[i]!, aucChange: auc[i]!, accuracyPp: acc[i]!, siteActivityChange: act[i]!, ci };
        const value = rankBy(candidate);
        const clear = ci !== null ? ci[0] > 0 : mean === null && value > 0;
        if (Number.isFinite(value) && clear && (top === null || value > rankBy(top))) top = candidate;
      });
    }
    return top ?? { site, scheme: 'none', strength: Number.NaN, dPrimeChange: Number.NaN, aucChange: Number.NaN, accuracyPp: Number.NaN, siteActivityChange: Number.NaN, ci: null };
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
  let tested = 0;
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
      tested = differences.length;
      control = { meanTuning: meanTuning / differences.length, meanShuffled: meanShuffled / differences.length, difference: test.mean, pValue: test.pValue, test: `paired sign-flip test across ${count(differences.length, 'cued category', 'cued categories')} (one-sided, ${test.exact ? 'exact' : 'Monte Carlo'})`, measure: input.measure };
    }
  }
  const lines: string[] = [];
  const warnings = sweepWarnings(input, tested);
  const ranked = [...best].filter((b) => Number.isFinite(rankBy(b))).sort((a, b) => rankBy(b) - rankBy(a));
  const measureName = input.measure === 'auc' ? 'ROC area (threshold-free)' : 'd′ at the fixed threshold';
  const symbol = input.measure === 'auc' ? 'ΔAUC' : 'Δd′';
  const top = ranked[0];
  if (top) {
    const ci = top.ci ? ` [${signed(top.ci[0], input.measure === 'auc' ? 3 : 2)}, ${signed(top.ci[1], input.measure === 'auc' ? 3 : 2)}]` : '';
    const caveats: string[] = [];
    if (!(top.siteActivityChange >= ATTENTION_BAND.low && top.siteActivityChange <= ATTENTION_BAND.high)) caveats.push(`outside the ${100 * ATTENTION_BAND.low}–${100 * ATTENTION_BAND.high} % band`);
    if (top.accuracyPp < -5) caveats.push(`accuracy at the fixed threshold ${signed(top.accuracyPp, 1)} pp`);
    lines.push(`largest gain in detection by ${measureName} (non-zero strengths, 95 % interval above 0): ${top.scheme} at ${top.site}, strength ${top.strength}, ${symbol} ${signed(input.measure === 'auc' ? top.aucChange : top.dPrimeChange, input.measure === 'auc' ? 3 : 2)}${ci}; AUC ${signed(top.aucChange, 3)}, d′ ${signed(top.dPrimeChange)} (${signed(top.accuracyPp, 1)} pp), site activity changed by ${(100 * top.siteActivityChange).toFixed(1)} %${caveats.length > 0 ? ` (${caveats.join('; ')})` : ''}`);
  } else lines.push(`largest gain in detection by ${measureName}: none — no scheme at a non-zero strength raised it with a 95 % interval above 0 at any site`);
  if (control) {
    const p = control.pValue >= 0.9995 ? '1' : control.pValue.toPrecision(2);
    lines.push(`tuning-based gain vs shuffled control by ${measureName}: mean ${symbol} ${control.meanTuning.toFixed(3)} vs ${control.meanShuffled.toFixed(3)}, p = ${p} (${control.test})`);
  }
  for (const c of calibration.filter((x) => x.strength !== null)) lines.push(`${c.target} at ${c.site} with ${c.scheme}: strength ${c.strength!.toFixed(3)}, site activity ${(100 * c.siteActivityChange!).toFixed(1)} % (${c.withinBand ? 'inside' : 'outside'} the ${100 * ATTENTION_BAND.low}–${100 * ATTENTION_BAND.high} % band)`);
  for (const w of warnings) lines.push(`warning: ${w}`);
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
    warnings,
    summary: lines.join('\n'),
  };
}

/** "1 cued category", "3 cued categories". */
function count(n: number, one: string, many: string): string {
  return `${n} ${n === 1 ? one : many}`;
}

/**
 * What could make a sweep's figures mislead, one sentence each: cued categories held by few (or most)
 * displays — fewer than 20 % or more than 80 % of the stimuli, e.g. `detect:all` on a set cued for one
 * kind — and a tuning-vs-shuffled test over so few categories that its smallest possible p value
 * (2^−k for k categories, exact sign-flip test) is above 0.05.
 * @param tested k, the categories the control test used (0 when there is no test).
 */
export function sweepWarnings(input: Pick<SummaryInput, 'baseline' | 'categories'>, tested: number): string[] {
  const warnings: string[] = [];
  const labels: readonly string[][] = (input.baseline as { stimuli?: { labels?: string[][] } }).stimuli?.labels ?? [];
  const n = labels.length;
  const unbalanced = input.categories
    .map((category) => ({ category, present: labels.filter((l) => l.includes(category)).length }))
    .filter((c) => n > 0 && (c.present < 0.2 * n || c.present > 0.8 * n));
  if (unbalanced.length > 0) {
    warnings.push(`unbalanced cued ${unbalanced.length === 1 ? 'category' : 'categories'}: ${unbalanced.map((c) => `${c.category} in ${c.present} of ${n} displays`).join(', ')}; hit rates then rest on few displays (or false alarms do) and intervals are wide — measure detection on a set cued for each category (sonde stimuli make --cued KIND)`);
  }
  if (tested > 0 && 2 ** -tested > 0.05) {
    warnings.push(`the tuning-vs-shuffled test across ${count(tested, 'cued category', 'cued categories')} cannot reach p < 0.05: its smallest possible p is ${Number((2 ** -tested).toPrecision(3))} (1/2^${tested}); cue at least 5 categories for a test that can`);
  }
  return warnings;
}
