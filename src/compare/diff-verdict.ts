/**
 * The diff in words: the depth-profile phrase, the non-finite verdict and failure, the one-line
 * verdict of a report, and the side-by-side comparison of two schemes.
 */
import { RuntimeFailure } from '../errors.js';
import { depthTrend, FLAT_PROFILE_CHANGE } from '../analysis/depth-profile.js';
import { signed } from '../format.js';
import { modulationWindows } from '../modulation/label.js';
import type { DiffReport, LayerDiffRow, SchemeComparison } from './diff-types.js';
import { diffSiteSizes, sizeGapNote, sizeGaps } from './size-match.js';

/**
 * How the relative change develops below the site: "halves every X layers below SITE", "doubles …",
 * or "keeps its size …" when the fitted profile changes it by less than 5 % over the measured stretch
 * (|rate| · layers below the site < 0.05).
 */
export function describeDepthProfile(report: DiffReport): string {
  const profile = report.depthProfile;
  const site = report.sites[0] ?? 'the site';
  const unit = report.depthUnit ?? 'recorded layers';
  const span = Math.max(1, ...report.layers.filter((l) => l.downstream).map((l) => l.belowSite).filter((d) => Number.isFinite(d)));
  if (report.sites.length === 0) return 'has no modulation site recorded in the manifest';
  switch (depthTrend(profile.rate, span)) {
    case 'flat':
      return `keeps its size below ${site} (within ${100 * FLAT_PROFILE_CHANGE} % over ${span} ${unit})`;
    case 'halves':
      return `halves every ${profile.halfDepth!.toFixed(1)} ${unit} below ${site}`;
    case 'doubles':
      return `doubles every ${profile.doublingDepth!.toFixed(1)} ${unit} below ${site}`;
    default:
      return `has too few ${unit} below ${site} for a depth profile`;
  }
}

/** "3 weight layers below", "1 weight layer below", "right after the site (no weight layer between)". */
export function describeBelow(count: number, unit: DiffReport['depthUnit'] = 'weight layers'): string {
  if (count === 0) return unit === 'weight layers' ? 'no weight layer below the site' : 'at the site';
  return `${count} ${count === 1 ? unit.replace(/s$/, '') : unit} below`;
}

/** Layers of a diff holding NaN/±Infinity values on either side. */
export function nonFiniteLayers(report: Pick<DiffReport, 'layers'>): LayerDiffRow[] {
  return report.layers.filter((l) => l.nonFinite.base + l.nonFinite.mod > 0);
}

/**
 * What a diff says instead of a verdict when any layer holds NaN/±Infinity values: no noise-floor,
 * survival, depth or task statement is made on such data (every metric they touch is NaN or infinite).
 * @returns the text, or null when every layer is finite.
 */
export function nonFiniteVerdict(report: Pick<DiffReport, 'layers'>): string | null {
  const tainted = nonFiniteLayers(report);
  if (tainted.length === 0) return null;
  const first = tainted[0]!;
  return `no verdict: the data are non-finite — NaN/±Infinity values in ${tainted.length} of ${report.layers.length} layers, from ${first.name} on (${first.nonFinite.base} baseline and ${first.nonFinite.mod} modulated values there); the metrics they touch are NaN or infinite`;
}

/**
 * The error a command raises after printing a report on non-finite data, so that no script takes it for
 * an answer (exit 1), or null when every layer is finite.
 * @param what names the comparison, e.g. "diff BASE MOD".
 */
export function nonFiniteFailure(report: Pick<DiffReport, 'layers'>, what: string): RuntimeFailure | null {
  const tainted = nonFiniteLayers(report);
  if (tainted.length === 0) return null;
  return new RuntimeFailure('E_NON_FINITE', `${what}: ${tainted.length} of ${report.layers.length} layers hold NaN/±Infinity values (first: ${tainted[0]!.name}); the report has no verdict`, {
    hint: 'the nonfinite_base/nonfinite_mod columns (--csv) and manifest.json layers[].nonFinite show where they start; check the stimuli and the modulation',
  });
}

/** One line saying how far the change propagates and what it does to the task (or, on non-finite data, that there is no verdict). */
export function verdictOf(report: DiffReport): string {
  const refused = nonFiniteVerdict(report);
  if (refused) return refused;
  const parts: string[] = [];
  const windows = modulationWindows(report.mod.modulation);
  const subject = `${report.layers.some((l) => l.signature) ? 'the modulation' : 'the change'}${windows.length > 0 ? ` (within a ${windows.join('; ')})` : ''}`;
  parts.push(`${subject} ${describeDepthProfile(report)}`);
  if (report.survival.layer) parts.push(`stays above the noise floor down to ${report.survival.layer} (${describeBelow(report.survival.belowSite!, report.depthUnit)})`);
  else if (report.sites.length > 0) parts.push('does not rise above the noise floor below the site');
  const siteRow = report.layers.find((l) => l.site && l.signature);
  const lastSignature = [...report.layers].reverse().find((l) => l.signature && l.downstream);
  if (siteRow?.signature && lastSignature?.signature) {
    parts.push(`signature slope ${siteRow.signature.slope.toFixed(3)} at the site, ${lastSignature.signature.slope.toFixed(3)} at ${lastSignature.name}`);
  }
  if (report.task) {
    const task = report.task;
    const ci = task.ci;
    const auc = `ROC area (threshold-free) ${signed(task.auc.change, 3)}${ci ? ` [${ci.auc[0].toFixed(3)}, ${ci.auc[1].toFixed(3)}]` : ''}`;
    const dPrime = `d′ at the fixed threshold ${signed(task.change.dPrime)}${ci ? ` [${ci.dPrime[0].toFixed(2)}, ${ci.dPrime[1].toFixed(2)}]` : ''}`;
    const range = task.matchedHitRateRangePp;
    const spread = range && range[1] - range[0] > 0.05 ? ` (range ${signed(range[0], 1)} to ${signed(range[1], 1)}: the curves rise vertically there)` : '';
    const rest = `hit rate at the baseline's false-alarm rate ${signed(task.matchedHitRatePp, 1)} pp${spread}, accuracy ${signed(task.change.accuracyPp, 1)} pp`;
    parts.push(`detection by ${task.measure === 'dprime' ? `${dPrime} (${auc})` : `${auc} (${dPrime})`}, ${rest}`);
    const flagged = task.categories.filter((c) => c.degenerate);
    if (flagged.length > 0) {
      const names = flagged.length === task.categories.length ? (flagged.length === 1 ? flagged[0]!.category : `all ${flagged.length} categories`) : flagged.map((c) => c.category).join(', ');
      parts.push(`no d′ at the fixed threshold for ${names}: ${flagged[0]!.degenerate} — read the ROC area, or pass --threshold`);
    }
  }
  return parts.join('; ');
}

/** Side-by-side comparison of two schemes against the same baseline. */
export function compareSchemes(a: DiffReport, b: DiffReport, measure: 'auc' | 'dprime' = a.task?.measure ?? 'auc'): SchemeComparison {
  const layers = a.layers.map((la, i) => {
    const lb = b.layers[i]!;
    const larger: 'a' | 'b' | 'equal' = la.relativeChange > lb.relativeChange ? 'a' : lb.relativeChange > la.relativeChange ? 'b' : 'equal';
    const separated = la.relativeChangeCi !== null && lb.relativeChangeCi !== null && (la.relativeChangeCi[0] > lb.relativeChangeCi[1] || lb.relativeChangeCi[0] > la.relativeChangeCi[1]);
    return { name: la.name, depth: la.depth, a: la.relativeChange, b: lb.relativeChange, larger, separated };
  });
  let task: SchemeComparison['task'] = null;
  if (a.task && b.task) {
    const key = measure === 'auc' ? 'auc' : 'dPrime';
    const da = measure === 'auc' ? a.task.auc.change : a.task.change.dPrime;
    const db = measure === 'auc' ? b.task.auc.change : b.task.change.dPrime;
    const separated = a.task.ci !== null && b.task.ci !== null && (a.task.ci[key][0] > b.task.ci[key][1] || b.task.ci[key][0] > a.task.ci[key][1]);
    task = { a: da, b: db, larger: da > db ? 'a' : db > da ? 'b' : 'equal', separated, measure };
  }
  // the layers below every site of both schemes (A and B may modulate different sites)
  const below = layers.filter((_, i) => a.layers[i]!.downstream && b.layers[i]!.downstream);
  const aWins = below.filter((l) => l.larger === 'a').length;
  const bWins = below.filter((l) => l.larger === 'b').length;
  const sameSites = a.sites.length === b.sites.length && a.sites.every((site) => b.sites.includes(site));
  const refused = nonFiniteVerdict(a) ?? nonFiniteVerdict(b);
  if (refused) return { a, b, layers, task, verdict: `${nonFiniteVerdict(a) ? 'A' : 'B'}: ${refused}` };
  const parts = [`below ${sameSites ? 'the site' : "both schemes' sites"}, A changes activity more in ${aWins} of ${below.length} layers and B in ${bWins}`];
  if (task) parts.push(`detection ${task.measure === 'auc' ? 'ROC-area (threshold-free)' : 'd′ (fixed threshold)'} change A ${signed(task.a, task.measure === 'auc' ? 3 : 2)} vs B ${signed(task.b, task.measure === 'auc' ? 3 : 2)}${task.separated ? ' (bootstrap intervals do not overlap)' : ' (within the bootstrap spread)'}`);
  const sizeNote = sizeGapNote(sizeGaps(diffSiteSizes(a, b)), 'relative change at the site');
  if (sizeNote) parts.push(sizeNote);
  return { a, b, layers, task, verdict: parts.join('; ') };
}
