/**
 * The headline: what a result found, in one or two plain sentences written from its numbers (never
 * canned text), with the measure, its interval and the reference it beats or not, and a one-line caveat.
 * Shown first in the HTML report and last in the terminal.
 *
 * Rules (the words follow the numbers):
 * - size-matched comparison: the scheme row (not a reference: ceiling, shuffled) with the largest
 *   held-out ΔAUC; "raises"/"lowers" only when its 95 % interval lies above/below 0, else "does not
 *   change … detectably"; against the shuffled control at the same site, "beats" only when the paired
 *   tuning − shuffled interval (tuning rows) lies above 0, or, for other schemes, when the two intervals
 *   do not overlap; the ceiling named when it was measured; second sentence: at how many sites tuning-based
 *   gain beats shuffled;
 * - diff: the ROC-area change of the detection read-out with its interval, and whether the change is
 *   still above the noise floor at the deepest layer;
 * - sweep: the best site × scheme × strength by its measure, and the tuning-vs-shuffled test.
 */
import type { DiffReport } from '../compare/diff-types.js';
import type { SizeMatchedComparison, SchemeEffect, Interval } from '../replay/size-matched.js';
import type { SweepResult } from '../replay/sweep-types.js';
import { signed } from '../format.js';

/** The caveat in one line (the report links it to the full text). */
export const CAVEAT_LINE = 'A property of this network, these stimuli and this readout, not evidence about brains.';

/** A headline: sentences, each plain text. */
export interface Headline {
  sentences: string[];
}

function ci(i: Interval): string {
  return `${signed(i.estimate, 3)} [95 % CI ${signed(i.low, 3)}, ${signed(i.high, 3)}]`;
}

function direction(i: Interval, what: string): string {
  if (i.low > 0) return `raises ${what} by ${ci(i)}`;
  if (i.high < 0) return `lowers ${what} by ${ci(i)}`;
  return `does not change ${what} detectably (${ci(i)})`;
}

function siteWords(site: string, short: (name: string) => string): string {
  const parts = site.split('+');
  return parts.length > 1 ? `all ${parts.length} sites at once` : short(site);
}

const SCHEME_WORDS: Readonly<Record<string, string>> = { tuning: 'tuning-based gain', sensitivity: 'sensitivity-based gain', 'tuning-all': 'tuning-based gain', uniform: 'uniform gain' };

/**
 * Headline of a size-matched comparison (see the module comment).
 * @param c the comparison.
 * @param short how a site is named (default: as it is).
 * @returns one or two sentences; a single sentence saying so when there is no scheme row.
 */
export function sizeMatchedHeadline(c: SizeMatchedComparison, short: (name: string) => string = (n) => n): Headline {
  const schemes = c.effects.filter((e) => e.scheme !== 'ceiling' && !e.scheme.startsWith('shuffled') && Number.isFinite(e.aucChange.estimate));
  if (schemes.length === 0) return { sentences: ['The comparison holds no scheme row with a finite ROC-area change.'] };
  const top = schemes.reduce((a, e) => (e.aucChange.estimate > a.aucChange.estimate ? e : a), schemes[0]!);
  const where = siteWords(top.site, short);
  const shuffledScheme = top.site.includes('+') ? 'shuffled-all' : 'shuffled';
  const shuffled = c.effects.find((e) => e.scheme === shuffledScheme && e.site === top.site);
  const paired = top.scheme.startsWith('tuning') ? c.versusShuffled.find((v) => v.site === top.site) : undefined;
  let versus = '';
  if (paired) {
    versus = paired.difference.low > 0 ? `beating its shuffled control (tuning − shuffled ${ci(paired.difference)})` : `not beating its shuffled control (tuning − shuffled ${ci(paired.difference)})`;
  } else if (shuffled) {
    const apart = top.aucChange.low > shuffled.aucChange.high;
    versus = `${apart ? 'above' : 'not clearly above'} the shuffled control's ${ci(shuffled.aucChange)}${apart ? ' (intervals apart)' : ' (intervals overlap)'}`;
  }
  const ceiling = c.effects.find((e: SchemeEffect) => e.scheme === 'ceiling' && e.site === top.site);
  const ceilingText = ceiling ? `; the fitted ceiling of the same size reaches ${signed(ceiling.aucChange.estimate, 3)}${top.fractionOfCeiling !== null ? ` (this is ${(100 * top.fractionOfCeiling).toFixed(0)} % of it)` : ''}` : '';
  const first = `Of the schemes scaled to ${(100 * c.size).toFixed(0)} % modulation size, ${SCHEME_WORDS[top.scheme] ?? top.scheme} at ${where} does best: it ${direction(top.aucChange, `the${c.heldOut ? ' held-out' : ''} ROC area of the cued readout`)}${versus ? `, ${versus}` : ''}${ceilingText}.`;
  const sentences = [first];
  const singles = c.versusShuffled.filter((v) => !v.site.includes('+'));
  if (singles.length > 0) {
    const beats = singles.filter((v) => v.difference.low > 0).map((v) => short(v.site));
    const below = singles.filter((v) => v.difference.high < 0).map((v) => short(v.site));
    sentences.push(`Tuning-based gain beats its shuffled control at ${beats.length} of ${singles.length} sites${beats.length > 0 ? ` (${beats.join(', ')})` : ''}${below.length > 0 ? ` and is below it at ${below.length} (${below.join(', ')})` : ''}.`);
  }
  return { sentences };
}

/**
 * Headline of one diff (see the module comment).
 * @param d the diff report.
 * @param short how a layer is named (default: as it is).
 */
export function diffHeadline(d: DiffReport, short: (name: string) => string = (n) => n): Headline {
  const site = d.sites.length > 0 ? d.sites.map(short).join(', ') : 'no recorded site';
  const survival = d.survival?.layer ? `is still above the noise floor at ${short(d.survival.layer)}` : 'does not rise above the noise floor below the site';
  const sentences = [`The modulation at ${site} ${survival}.`];
  const auc = d.task?.auc;
  if (auc && Number.isFinite(auc.change)) {
    const interval: Interval = { estimate: auc.change, low: auc.ci?.[0] ?? Number.NaN, high: auc.ci?.[1] ?? Number.NaN };
    sentences.push(auc.ci ? `It ${direction(interval, `the ROC area of "${d.task!.readout}"`)} (baseline ${auc.base.toFixed(3)}).` : `It changes the ROC area of "${d.task!.readout}" by ${signed(auc.change, 3)} (no interval: run without bootstrap).`);
  }
  return { sentences };
}

/**
 * Headline of a sweep (see the module comment).
 * @param s the sweep result.
 * @param short how a site is named (default: as it is).
 */
export function sweepHeadline(s: SweepResult, short: (name: string) => string = (n) => n): Headline {
  const byAuc = s.measure !== 'dprime';
  const value = (b: SweepResult['best'][number]) => (byAuc ? b.aucChange : b.dPrimeChange);
  const best = (s.best ?? []).filter((b) => Number.isFinite(value(b))).sort((a, b) => value(b) - value(a))[0];
  const sentences: string[] = [];
  if (best) {
    sentences.push(value(best) > 0
      ? `The largest mean ${byAuc ? 'ROC-area' : 'd′'} change in the sweep is ${signed(value(best), byAuc ? 3 : 2)}, with ${best.scheme} gain at ${short(best.site)} (strength ${best.strength}, site activity changed by ${(100 * best.siteActivityChange).toFixed(1)} %).`
      : `No scheme and strength in the sweep raised the mean ${byAuc ? 'ROC area' : 'd′'} at any site.`);
  }
  const c = s.control;
  if (c && Number.isFinite(c.pValue)) sentences.push(`Tuning-based gain vs its shuffled control: ${signed(c.meanTuning, 3)} vs ${signed(c.meanShuffled, 3)} (p = ${c.pValue.toPrecision(2)}, ${c.test}).`);
  return { sentences: sentences.length > 0 ? sentences : ['The sweep has no finite best cell.'] };
}
