/**
 * The report's HTML tables, one function per table. Every value from an input passes through `html`
 * (escaped); numbers that JSON turned into null show as "–".
 */
import { depthTrend, FLAT_PROFILE_CHANGE } from '../../analysis/depth-profile.js';
import type { TableComparison } from '../../compare/compare-tables.js';
import type { DiffReport, SchemeComparison, TaskReport } from '../../compare/diff-types.js';
import type { SweepResult } from '../../replay/sweep-types.js';
import type { TaskCurvePoint } from './chart-data.js';
import { num, type TuningSummaries } from './inputs.js';
import { html, SafeHtml, type HtmlValue } from './markup.js';
import { shortLayerLabels } from '../layer-labels.js';
import { unitCount, unitWords } from '../unit-words.js';

/** A short layer label with the full tensor name on hover (`title`); the full name alone when they agree. */
export function layerCell(name: string, labels: ReadonlyMap<string, string>): HtmlValue {
  const label = labels.get(name) ?? name;
  return label === name ? name : html`<span title="${name}">${label}</span>`;
}

/** Short labels for a list of names, and a cell function using them. */
function labelled(names: readonly string[]): (name: string) => HtmlValue {
  const labels = shortLayerLabels(names);
  return (name) => layerCell(name, labels);
}

/** Fixed-point number, "–" for null/NaN, "∞" for infinities. */
export function fmt(value: unknown, digits = 3): string {
  const x = num(value);
  if (Number.isNaN(x)) return '–';
  if (!Number.isFinite(x)) return x > 0 ? '∞' : '−∞';
  return x.toFixed(digits);
}

/** Signed fixed-point ("+0.42", "−1.30"; a value that rounds to zero is "+0.00"), "–" for null/NaN. */
export function sgn(value: unknown, digits = 2): string {
  const x = num(value);
  if (Number.isNaN(x)) return '–';
  if (!Number.isFinite(x)) return x > 0 ? '+∞' : '−∞';
  const text = Math.abs(x).toFixed(digits);
  return `${x < 0 && Number(text) !== 0 ? '−' : '+'}${text}`;
}

/** Three significant digits, scientific outside [0.01, 1000); for values spanning decades. */
export function sci(value: unknown): string {
  const x = num(value);
  if (Number.isNaN(x)) return '–';
  if (!Number.isFinite(x)) return x > 0 ? '∞' : '−∞';
  if (x === 0) return '0';
  const m = Math.abs(x);
  return m >= 0.01 && m < 1000 ? x.toPrecision(3) : x.toExponential(2);
}

/** A fraction as a percentage: 0.083 → "8.3 %"; "–" for null/NaN. */
export function pct(value: unknown, digits = 1): string {
  const x = num(value);
  return Number.isFinite(x) ? `${(100 * x).toFixed(digits)} %` : '–';
}

function interval(ci: readonly unknown[] | null | undefined, f: (v: unknown) => string): string {
  return Array.isArray(ci) && ci.length === 2 ? ` [${f(ci[0])}, ${f(ci[1])}]` : '';
}

interface Row {
  cells: readonly HtmlValue[];
  /** A CSS class of this module's choosing (never input text). */
  className?: 'site' | 'mean';
}

const NUM = new SafeHtml(' class="num"');
const NONE = new SafeHtml('');

/** A table: header cells and rows of cells; `numeric` columns are right-aligned. */
function table(head: readonly string[], rows: readonly Row[], numeric: readonly number[], caption?: HtmlValue): SafeHtml {
  const align = (i: number) => (numeric.includes(i) ? NUM : NONE);
  const headCells = head.map((h, i) => html`<th${align(i)}>${h}</th>`);
  const body = rows.map((row) => html`<tr${row.className ? new SafeHtml(` class="${row.className}"`) : NONE}>${row.cells.map((c, i) => html`<td${align(i)}>${c}</td>`)}</tr>`);
  return html`<div class="table-wrap"><table>${caption ? html`<caption>${caption}</caption>` : ''}<thead><tr>${headCells}</tr></thead><tbody>${body}</tbody></table></div>`;
}

/**
 * Per-layer table of one diff: depth (◆ at the site), layer, op, relative change with its bootstrap
 * interval, cosine, channel ratio (feature ratio at token layers, see unit-words.ts), fraction of channels up/down, effect size, signature slope (when a
 * tuning table was given) and whether the change is above the noise floor.
 * @param diff a diff report.
 */
export function diffLayerTable(diff: DiffReport): SafeHtml {
  const withSignature = diff.layers.some((l) => l.signature);
  const shortNames = shortLayerLabels(diff.layers.map((l) => l.name));
  const words = unitWords(diff.layers.map((l) => l.unit), diff.layers.map((l) => shortNames.get(l.name)!));
  const head = ['depth', 'layer', 'op', 'relative change [95 % CI]', 'cosine', `${words.one} ratio`, 'up / down', 'effect size'];
  if (withSignature) head.push('signature slope');
  head.push('vs floor');
  const cell = labelled(diff.layers.map((l) => l.name));
  // unchanged layers above the site (the baseline's own files, or no change) are folded into one row
  const above = (l: DiffReport['layers'][number]) => !l.site && !(l.downstream ?? num(l.belowSite) > 0) && (l.unchanged || num(l.relativeChange) === 0);
  const folded = diff.layers.filter(above);
  const foldRow: Row[] = folded.length > 1
    ? [{ cells: [`${fmt(folded[0]!.depth, 0)}–${fmt(folded[folded.length - 1]!.depth, 0)}`, html`<span title="${folded.map((l) => l.name).join(', ')}">${folded.length} layers above the site</span>`, '', '0', '', '', '', '', ...(withSignature ? [''] : []), folded.every((l) => l.unchanged) ? 'same file' : 'unchanged'] }]
    : [];
  const shown = folded.length > 1 ? diff.layers.filter((l) => !above(l)) : diff.layers;
  const rows: Row[] = [...foldRow, ...shown.map((l) => {
    const cells: HtmlValue[] = [
      `${fmt(l.depth, 0)}${l.site ? ' ◆' : ''}`,
      cell(l.name),
      l.op,
      `${sci(l.relativeChange)}${interval(l.relativeChangeCi, sci)}`,
      fmt(l.cosine, 4),
      l.signedLayer ? 'signed (no ratio)' : `${fmt(l.channelRatioMean)} ± ${fmt(l.channelRatioSd, 2)}`,
      `${pct(l.fractionUp, 0)} / ${pct(l.fractionDown, 0)}`,
      fmt(l.effectSize, 2),
    ];
    if (withSignature) cells.push(l.signature ? `${fmt(l.signature.slope)}${interval(l.signature.ci?.slope, fmt)}` : '');
    cells.push(l.unchanged ? 'same file' : l.aboveFloor ? 'above' : 'below');
    return l.site ? { cells, className: 'site' as const } : { cells };
  })];
  const numeric = withSignature ? [0, 3, 4, 5, 6, 7, 8] : [0, 3, 4, 5, 6, 7];
  return table(head, rows, numeric, `◆ modulation site · ${words.one} ratio = modulated ÷ baseline ${words.one} mean (mean ± sd over ${words.many})${words.note ? ` · ${words.note}` : ''} · floor: ${diff.floor?.description ?? 'not given'}`);
}

function profileText(diff: DiffReport): string {
  const p = diff.depthProfile;
  if (!p) return '–';
  const r2 = Number.isFinite(num(p.r2)) ? ` (r² ${fmt(p.r2, 2)})` : '';
  // the same rule as the command line's verdict (describeDepthProfile): flat within 5 % over the layers below the site
  const unit = diff.depthUnit ?? 'recorded layers';
  const span = Math.max(1, ...diff.layers.filter((l) => l.downstream ?? num(l.belowSite) > 0).map((l) => num(l.belowSite)).filter((d) => Number.isFinite(d)));
  switch (depthTrend(num(p.rate), span)) {
    case 'flat':
      return `keeps its size (within ${100 * FLAT_PROFILE_CHANGE} % over ${span} ${unit})`;
    case 'halves':
      return `halves every ${fmt(p.halfDepth, 1)} ${unit}${r2}`;
    case 'doubles':
      return `doubles every ${fmt(p.doublingDepth, 1)} ${unit}${r2}`;
    default:
      return `too few ${unit} to fit`;
  }
}

/**
 * One row per diff run: how far the change survives above the floor, its depth profile and the task
 * change.
 * @param runs labelled diff reports (the label names the site).
 */
export function diffSummaryTable(runs: ReadonlyArray<{ label: string; diff: DiffReport }>): SafeHtml {
  const rows: Row[] = runs.map(({ label, diff }) => ({
    cells: [
      label,
      diff.survival?.layer ? `${diff.survival.layer} (${fmt(diff.survival.belowSite, 0)} ${diff.depthUnit ?? 'recorded layers'} below)` : 'not above the floor',
      profileText(diff),
      diff.task ? `${sgn(diff.task.auc?.change, 3)}${interval(diff.task.auc?.ci, (v) => fmt(v, 3))}` : '–',
      diff.task ? `${sgn(diff.task.change.dPrime)}${interval(diff.task.ci?.dPrime, (v) => fmt(v, 2))}` : '–',
      diff.task ? `${sgn(diff.task.change.accuracyPp, 1)} pp` : '–',
    ],
  }));
  return table(['run', 'above the floor down to', 'depth profile', 'ΔAUC [95 % CI]', 'Δd′ (fixed threshold) [95 % CI]', 'Δaccuracy'], rows, [3, 4, 5]);
}

/**
 * The detection read-out of one diff: per category and the mean, baseline → modulated.
 * @param task the diff's task report.
 */
export function taskTable(task: TaskReport): SafeHtml {
  const arrow = (a: unknown, b: unknown, d = 2) => `${fmt(a, d)} → ${fmt(b, d)}`;
  const aucCells = (auc: TaskReport['auc'] | undefined, matched: unknown) => [arrow(auc?.base, auc?.mod, 3), `${sgn(auc?.change, 3)}${interval(auc?.ci, (v) => fmt(v, 3))}`, `${sgn(matched, 1)} pp`];
  const controlCell = (control: { hitRatePp: number; dPrime: number } | undefined) => (control ? `${sgn(control.hitRatePp, 1)} pp, ${sgn(control.dPrime)}` : '–');
  // two tables, so that each fits the page: the threshold-free read-out, then the fixed threshold
  const free = (name: string, auc: TaskReport['auc'] | undefined, matched: unknown, className?: 'mean'): Row => ({ cells: [name, ...aucCells(auc, matched)], ...(className ? { className } : {}) });
  const fixedRow = (name: string, threshold: string, c: Pick<TaskReport, 'base' | 'mod' | 'change' | 'ci'>, control: { hitRatePp: number; dPrime: number } | undefined, className?: 'mean'): Row => ({
    cells: [name, threshold, arrow(c.base.hitRate, c.mod.hitRate), arrow(c.base.falseAlarmRate, c.mod.falseAlarmRate), arrow(c.base.dPrime, c.mod.dPrime), arrow(c.base.criterion, c.mod.criterion), `${pct(c.base.accuracy)} → ${pct(c.mod.accuracy)}`, `${sgn(c.change.dPrime)}${interval(c.ci?.dPrime, (v) => fmt(v, 2))}`, `${sgn(c.change.accuracyPp, 1)} pp`, controlCell(control)],
    ...(className ? { className } : {}),
  });
  const freeRows = [...task.categories.map((c) => free(c.category, c.auc, c.matchedHitRatePp)), free('mean', task.auc, task.matchedHitRatePp, 'mean')];
  const fixedRows = [...task.categories.map((c) => fixedRow(c.category, fmt(c.threshold, 2), c, c.criterionControl)), fixedRow('mean', '', task, task.criterionControl, 'mean')];
  return html`${table(['category', 'AUC', 'ΔAUC [95 % CI]', 'ΔH at base F'], freeRows, [1, 2, 3], `threshold-free: detection from "${task.readout}", base → modulated · AUC: ROC area · ΔH at base F: hit-rate change at the baseline's false-alarm rate`)}${table(
    ['category', 'threshold', 'hit rate', 'false alarms', 'd′', 'criterion', 'accuracy', 'Δd′ [95 % CI]', 'Δaccuracy', 'shift only: ΔH, Δd′'],
    fixedRows,
    [1, 2, 3, 4, 5, 6, 7, 8, 9],
    `at the fixed threshold: ${task.thresholdRule} · base → modulated · criterion shift only: the baseline scores shifted by a constant to the modulated false-alarm rate (what moving the criterion alone does)`,
  )}`;
}

/**
 * Side-by-side relative change of two schemes, per layer.
 * @param comparison the scheme comparison.
 * @param labels what A and B are called on the page.
 */
export function comparisonTable(comparison: SchemeComparison, labels: readonly [string, string]): SafeHtml {
  const cell = labelled(comparison.layers.map((l) => l.name));
  const rows: Row[] = comparison.layers.map((l, i) => {
    const site = comparison.a.layers[i]?.site === true || comparison.b.layers[i]?.site === true;
    const cells = [`${fmt(l.depth, 0)}${site ? ' ◆' : ''}`, cell(l.name), sci(l.a), sci(l.b), l.larger === 'equal' ? '=' : l.larger === 'a' ? 'A' : 'B', l.separated ? 'yes' : 'no'];
    return site ? { cells, className: 'site' } : { cells };
  });
  return table(['depth', 'layer', 'A: relative change', 'B: relative change', 'larger', 'intervals apart'], rows, [0, 2, 3], html`A = ${labels[0]} · B = ${labels[1]}`);
}

/** The measure a sweep ranks by (sweeps written before it was recorded ranked by d′). */
export function sweepMeasureOf(sweep: SweepResult): 'auc' | 'dprime' {
  return sweep.measure === 'auc' || sweep.measure === 'dprime' ? sweep.measure : 'dprime';
}

/** Words for a ranking measure. */
export function measureWords(measure: 'auc' | 'dprime'): string {
  return measure === 'auc' ? 'ROC area (threshold-free)' : 'd′ at the fixed threshold';
}

/**
 * The best cell of every site (largest mean change in the sweep's measure) from a sweep.
 * @param sweep the sweep result.
 */
export function bestCellsTable(sweep: SweepResult): SafeHtml {
  const cell = labelled(sweep.sites);
  const rows: Row[] = (sweep.best ?? []).map((b) => ({ cells: [cell(b.site), b.scheme, fmt(b.strength, 2), sgn(b.aucChange, 3), sgn(b.dPrimeChange), `${sgn(b.accuracyPp, 1)} pp`, pct(b.siteActivityChange)] }));
  return table(['site', 'best scheme', 'strength', 'ΔAUC', 'Δd′', 'Δaccuracy', 'activity change'], rows, [2, 3, 4, 5, 6], `best by ${measureWords(sweepMeasureOf(sweep))}; means over cued categories (and control seeds); activity change: mean |gain − 1| at the site`);
}

/**
 * Per site and scheme: the strength with the largest mean change in the measure, the changes there, and
 * the change at the largest strength swept.
 * @param points rows from `taskCurves`.
 * @param measure what "best" and the last column use: `auc` (default) or `dprime`.
 */
export function sweepTaskTable(points: readonly TaskCurvePoint[], measure: 'auc' | 'dprime' = 'auc'): SafeHtml {
  const value = (p: TaskCurvePoint) => (measure === 'auc' ? p.aucChange : p.dPrimeChange);
  const digits = measure === 'auc' ? 3 : 2;
  const groups = new Map<string, TaskCurvePoint[]>();
  for (const p of points) {
    const key = JSON.stringify([p.site, p.scheme]);
    groups.set(key, [...(groups.get(key) ?? []), p]);
  }
  const siteCell = labelled([...new Set(points.map((p) => p.site))]);
  const rows: Row[] = [...groups.values()].map((list) => {
    const finite = list.filter((p) => Number.isFinite(value(p)));
    const best = finite.reduce<TaskCurvePoint | null>((acc, p) => (acc === null || value(p) > value(acc) ? p : acc), null);
    const last = list[list.length - 1]!;
    const [low, high] = measure === 'auc' ? [last.aucLow, last.aucHigh] : [last.low, last.high];
    const spread = high > low ? ` (${sgn(low, digits)} … ${sgn(high, digits)})` : '';
    return { cells: [siteCell(list[0]!.site), list[0]!.scheme, best ? fmt(best.strength, 2) : '–', best ? sgn(best.aucChange, 3) : '–', best ? sgn(best.dPrimeChange) : '–', best ? `${sgn(best.matchedHitRatePp, 1)} pp` : '–', best ? `${sgn(best.accuracyPp, 1)} pp` : '–', `${sgn(value(last), digits)}${spread}`] };
  });
  const top = points.length > 0 ? Math.max(...points.map((p) => p.strength).filter(Number.isFinite)) : Number.NaN;
  const symbol = measure === 'auc' ? 'ΔAUC' : 'Δd′';
  return table(['site', 'scheme', `best strength (by ${symbol})`, 'ΔAUC', 'Δd′', 'ΔH at base F', 'Δaccuracy', `${symbol} at ${fmt(top, 2)}`], rows, [2, 3, 4, 5, 6, 7], 'means over cued categories and control seeds; in brackets the range over control seeds; ΔH at base F: hit-rate change at the baseline\'s false-alarm rate');
}

/**
 * Calibration of a sweep: per site and scheme, the smallest strength reaching the target and the
 * activity change it implies, against the rule-of-thumb band.
 * @param sweep the sweep result.
 * @returns the table, or null when the sweep has no calibration.
 */
export function calibrationTable(sweep: SweepResult): SafeHtml | null {
  const list = sweep.calibration ?? [];
  if (list.length === 0) return null;
  const cell = labelled(sweep.sites);
  // pairs that did not reach the target are listed in one line, not as rows of "not reached"
  const reached = list.filter((c) => c.strength !== null);
  const missed = list.filter((c) => c.strength === null);
  const rows: Row[] = reached.map((c) => ({ cells: [cell(c.site), c.scheme, c.target, fmt(c.strength, 3), c.siteActivityChange === null ? '–' : pct(c.siteActivityChange), c.withinBand === null ? '–' : c.withinBand ? 'inside' : 'outside'] }));
  const band = sweep.band ? `band ${pct(sweep.band.low, 0)}–${pct(sweep.band.high, 0)} (${sweep.band.source})` : 'no band given';
  const labels = shortLayerLabels(sweep.sites);
  const missedText = missed.length === 0 ? '' : missed.length === list.length
    ? html`<p class="note">No site × scheme pair (of ${missed.length}) reached ${missed[0]!.target} within the swept strengths.</p>`
    : html`<p class="note">Not reached within the swept strengths (${missed.length} of ${list.length}): ${missed.map((c) => `${labels.get(c.site) ?? c.site} ${c.scheme}`).join(', ')}.</p>`;
  return html`${reached.length > 0 ? table(['site', 'scheme', 'target', 'strength', 'implied activity change', 'band'], rows, [3, 4], band) : ''}${missedText}`;
}

/**
 * Per-layer tuning–sensitivity agreement: pooled Pearson r and Spearman ρ, and r per category.
 * @param agreement the table comparison.
 */
export function agreementTable(agreement: TableComparison): SafeHtml {
  const categories = agreement.categories ?? [];
  const cell = labelled(agreement.layers.map((l) => l.layer));
  const rows: Row[] = agreement.layers.map((l) => ({ cells: [fmt(l.depth, 0), cell(l.layer), fmt(l.channels, 0), fmt(l.pooled.pearson), fmt(l.pooled.spearman), ...categories.map((c) => fmt(l.byCategory?.find((b) => b.category === c)?.pearson, 2))] }));
  const numeric = [0, 2, 3, 4, ...categories.map((_, i) => 5 + i)];
  const scale = agreement.sensitivityScale === 'raw' ? 'raw sensitivities (one shared category)' : 'sensitivities z-scored across categories';
  return table(['depth', 'layer', 'channels', 'pooled r', 'pooled ρ', ...categories.map((c) => `r ${c}`)], rows, numeric, `tuning value vs ${scale}, across channels`);
}

/**
 * Per-layer tuning summary: fraction of selective channels, mean selectivity, flagged channels.
 * @param tuning tuning summaries.
 */
export function tuningTable(tuning: TuningSummaries): SafeHtml {
  const cell = labelled(tuning.layers.map((l) => l.layer));
  const shortNames = shortLayerLabels(tuning.layers.map((l) => l.layer));
  const words = unitWords(tuning.layers.map((l) => l.unit), tuning.layers.map((l) => shortNames.get(l.layer)!));
  const rows: Row[] = tuning.layers.map((l) => ({ cells: [fmt(l.depth, 0), cell(l.layer), l.op ?? '', unitCount(fmt(l.channels, 0), l.unit, words), pct(l.selectiveFraction, 0), fmt(l.meanSelectivity), fmt(l.zeroVarianceChannels, 0), fmt(l.nonFiniteChannels, 0)] }));
  const index = Number.isFinite(num(tuning.selectiveIndex)) ? `selective: index ≥ ${fmt(tuning.selectiveIndex, 2)} (preferred category at least twice the others)` : undefined;
  const caption = [index, words.note].filter((t) => t).join(' · ');
  return table(['depth', 'layer', 'op', words.many, 'selective', 'mean selectivity', 'zero-variance', 'NaN'], rows, [0, 3, 4, 5, 6, 7], caption || undefined);
}
