/**
 * `renderHtmlReport` / `writeHtmlReport`: one self-contained HTML page from diff, scheme-comparison,
 * sweep, tuning–sensitivity agreement and tuning-summary results. Charts are inline SVG rendered in Node
 * (vega-lite → vega), styles are inline, fonts are the system's: the page needs no network, no script
 * and no other file. Sections appear only for the kinds of input given:
 * - propagation through depth: relative change against depth, one line per diff run (site marked), a
 *   summary table beside it, and each run's per-layer table;
 * - detection read-out of each diff run; side-by-side tables of scheme comparisons;
 * - task performance against strength (per site and scheme, shuffled control with its seed range, zero
 *   line) with the best cells and a per-scheme task table; the site × depth propagation matrix and depth
 *   profiles (with `--depth-profile` sweeps); calibration;
 * - tuning–sensitivity agreement against depth; tuning across depth.
 */
import { dirname, isAbsolute, relative, resolve } from 'node:path';
import { replaceFile } from '../../disk/atomic-file.js';
import { assertOutFileWritable } from '../../outputs/output-file.js';
import { RuntimeFailure, UsageError } from '../../errors.js';
import { TOOL_VERSION } from '../../version.js';
import type { DiffReport } from '../../compare/diff-types.js';
import type { SweepResult } from '../../replay/sweep-types.js';
import type { SizeMatchedComparison } from '../../replay/size-matched.js';
import { agreementData, propagationMatrix, relativeChangeData, runLabel, selectiveMeasure, taskCurves, tuningData, uniqueLabels } from './chart-data.js';
import { unitWords } from '../unit-words.js';
import { depthLinesSpec, depthProfileSpec, PALETTE, propagationMatrixSpec, relativeChangeSpec, taskCurveSpec } from './chart-specs.js';
import { classifyReportInput, num, readReportInput, type ReportInput } from './inputs.js';
import { html, type HtmlValue, type SafeHtml } from './markup.js';
import { renderPage, type PageSection } from './page.js';
import { renderSvg, svgWidth } from './render-svg.js';
import { describeSizeMatched, sizeMatchedSection } from './size-matched-section.js';
import type { TopLevelSpec } from 'vega-lite';
import { CAVEAT_LINE, diffHeadline, sizeMatchedHeadline, sweepHeadline, type Headline } from '../headline.js';
import { shortLayerLabels } from '../layer-labels.js';
import { forestSpec } from './chart-specs.js';
import { pairPictureData } from '../pictures/pair-pictures.js';
import { pairPictureSections } from '../pictures/pair-picture-sections.js';
import { agreementTable, bestCellsTable, calibrationTable, comparisonTable, diffLayerTable, diffSummaryTable, fmt, measureWords, pct, sci, sgn, sweepMeasureOf, sweepTaskTable, taskTable, tuningTable } from './tables.js';

/** Options of `renderHtmlReport`. */
export interface RenderReportOptions {
  /** Page title (default "Sonde report"). */
  title?: string;
  /** Names shown for inputs that are objects rather than paths (default `input 1`, `input 2`, …). */
  names?: readonly string[];
  /** Snapshot pairs whose pictures (stimuli, feature maps, ROC curves, signature, spatial profile) the report shows, read from the snapshots. */
  pictures?: ReadonlyArray<{ base: string; mod: string; tuning?: string; target?: string; title: string }>;
  /** Folder that paths in the page are shown relative to (default: the working folder; `writeHtmlReport`: the report's folder). */
  relativeTo?: string;
}

/** Options of `writeHtmlReport`. */
export interface WriteReportOptions extends RenderReportOptions {
  /** JSON files (paths), or parsed results (objects), or a mix. */
  inputs: readonly unknown[];
  /** The HTML file to write; an existing file is replaced only with `force`. */
  out: string;
  /** Replace an existing file at `out`. */
  force?: boolean;
}

/** What a rendered report holds. */
export interface HtmlReport {
  /** The HTML document. */
  html: string;
  /** Inputs in order, with their kinds. */
  inputs: Array<{ name: string; kind: ReportInput['kind'] }>;
  /** Section headings in page order. */
  sections: string[];
  /** Charts embedded (one inline SVG each). */
  charts: number;
  /** Warnings from vega-lite/vega while rendering, prefixed with the chart's id. */
  warnings: string[];
}

/** Renders charts with ids unique in the page, collecting warnings. */
class ChartRenderer {
  count = 0;
  readonly warnings: string[] = [];

  async figure(spec: TopLevelSpec, caption: HtmlValue, kind = 'chart'): Promise<SafeHtml> {
    this.count++;
    const id = `chart${this.count}`;
    const rendered = await renderSvg(spec, id);
    for (const w of rendered.warnings) this.warnings.push(`${id}: ${w}`);
    return html`<figure class="chart" id="${id}" data-picture="${kind}" style="--chart-width: ${svgWidth(rendered.svg)}px">${rendered.svg}<figcaption>${caption}</figcaption></figure>`;
  }
}

function pair(left: HtmlValue, right: HtmlValue): SafeHtml {
  return html`<div class="pair"><div>${left}</div><div>${right}</div></div>`;
}

/** Tables (or other blocks) side by side, wrapping when the page is narrow. */
function row(...blocks: HtmlValue[]): SafeHtml {
  return html`<div class="tables">${blocks.map((b) => html`<div>${b}</div>`)}</div>`;
}

/** A path as the page shows it: relative to `base` when it is absolute (the page may move with its folder). */
function shownPath(path: unknown, base: string): string {
  if (typeof path !== 'string') return '?';
  if (!isAbsolute(path)) return path;
  const rel = relative(base, path);
  return rel === '' ? '.' : rel;
}

function describe(input: ReportInput, base: string): string {
  const shown = (p: unknown) => shownPath(p, base);
  switch (input.kind) {
    case 'diff': {
      const d = input.diff;
      return `${shown(d.base?.folder)} → ${shown(d.mod?.folder)}; site ${d.sites.join(', ') || 'none recorded'}; ${fmt(d.stimuli, 0)} stimuli; ${runLabel(d)}`;
    }
    case 'comparison': {
      const c = input.comparison;
      return `A ${shown(c.a.mod?.folder)} vs B ${shown(c.b.mod?.folder)}, both against ${shown(c.a.base?.folder)}`;
    }
    case 'sweep': {
      const s = input.sweep;
      const strengths = s.strengths.map(num).filter(Number.isFinite);
      const range = strengths.length > 0 ? `${Math.min(...strengths)}–${Math.max(...strengths)}` : '–';
      return `model ${shown(s.model?.file)}; baseline ${shown(s.baseline)}; ${s.sites.length} sites × schemes ${s.schemes.join(', ')} × ${s.strengths.length} strengths (${range}) × ${(s.categories ?? []).length} cued categories; ${s.cells.length} cells`;
    }
    case 'size-matched':
      return describeSizeMatched({ ...input.comparison, fitSet: shown(input.comparison.fitSet), heldOutSet: shown(input.comparison.heldOutSet) });
    case 'agreement':
      return `${input.agreement.layers.length} layers; categories ${input.agreement.categories.join(', ')}`;
    case 'tuning':
      return `${input.tuning.snapshot ? `snapshot ${shown(input.tuning.snapshot)}; ` : ''}${input.tuning.layers.length} layers${input.tuning.categories ? `; categories ${input.tuning.categories.join(', ')}` : ''}`;
  }
}

const KIND_NAMES: Readonly<Record<ReportInput['kind'], string>> = { diff: 'diff', comparison: 'scheme comparison', sweep: 'sweep', 'size-matched': 'size-matched comparison', agreement: 'tuning–sensitivity agreement', tuning: 'tuning summary' };

function inputsTable(inputs: readonly ReportInput[], base: string): SafeHtml {
  const rows = inputs.map((i) => html`<tr><td class="name">${i.name}</td><td>${KIND_NAMES[i.kind]}</td><td>${describe(i, base)}</td></tr>`);
  return html`<div class="table-wrap"><table class="inputs"><thead><tr><th>input</th><th>kind</th><th>what was compared</th></tr></thead><tbody>${rows}</tbody></table></div>`;
}

/** The diff runs of all inputs, labelled uniquely: each diff, and both sides of each comparison. */
function diffRuns(inputs: readonly ReportInput[]): Array<{ label: string; diff: DiffReport; input: string }> {
  const runs: Array<{ label: string; diff: DiffReport; input: string }> = [];
  for (const input of inputs) {
    if (input.kind === 'diff') runs.push({ label: runLabel(input.diff), diff: input.diff, input: input.name });
    if (input.kind === 'comparison') {
      runs.push({ label: `A: ${runLabel(input.comparison.a)}`, diff: input.comparison.a, input: input.name });
      runs.push({ label: `B: ${runLabel(input.comparison.b)}`, diff: input.comparison.b, input: input.name });
    }
  }
  const labels = uniqueLabels(runs.map((r) => r.label));
  return runs.map((r, i) => ({ ...r, label: labels[i]! }));
}

async function propagationSection(runs: ReturnType<typeof diffRuns>, charts: ChartRenderer, short: (name: string) => string = (n) => n): Promise<PageSection> {
  const data = relativeChangeData(runs);
  const floor = data.floorInRange ? 'dashed: the noise floor of each run.' : Number.isFinite(data.floorMax) ? `The noise floor (at most ${sci(data.floorMax)}) lies below the plotted range.` : '';
  const caption = html`Relative change of every recorded layer, log scale; ◆ the modulation site. ${floor} ${data.omitted > 0 ? `${data.omitted} layer values of 0 (unchanged, e.g. above the site) or not finite are not drawn on the log axis.` : ''}`;
  const positions = new Map<number, string>();
  for (const r of runs) for (const l of r.diff.layers) if (!positions.has(num(l.depth))) positions.set(num(l.depth), short(l.name));
  const figure = await charts.figure(relativeChangeSpec(data, [...positions].map(([depth, label]) => ({ depth, label }))), caption);
  const details = runs.map((r) => html`<details open><summary>${r.label} <span class="note">(${r.input})</span></summary>${diffLayerTable(r.diff)}</details>`);
  return { id: 'propagation', heading: 'Propagation through depth', body: html`<p class="lead">How far the injected change travels below its site, one line per modulated run.</p>${figure}${diffSummaryTable(runs)}${details}` };
}

function taskSection(runs: ReturnType<typeof diffRuns>): PageSection | null {
  const withTask = runs.filter((r) => r.diff.task);
  if (withTask.length === 0) return null;
  const tables = withTask.map((r) => html`<h3>${r.label}</h3>${taskTable(r.diff.task!)}`);
  return { id: 'detection', heading: 'Detection read-out of the diffs', body: html`<p class="lead">ROC area (threshold-free), hit rate at the baseline's false-alarm rate, and hit rate, false alarms, d′ and criterion at the fixed threshold, baseline → modulated, per cued category. A gain that only moves the readout's criterion changes fixed-threshold d′ but not the ROC area; the last column shows what a pure criterion shift to the modulated false-alarm rate would do.</p>${tables}` };
}

function comparisonSection(inputs: readonly ReportInput[]): PageSection | null {
  const comparisons = inputs.filter((i): i is Extract<ReportInput, { kind: 'comparison' }> => i.kind === 'comparison');
  if (comparisons.length === 0) return null;
  const body = comparisons.map((c) => {
    const labels: [string, string] = [runLabel(c.comparison.a), runLabel(c.comparison.b)];
    const measure = c.comparison.task?.measure === 'auc' ? 'auc' : 'dprime';
    const digits = measure === 'auc' ? 3 : 2;
    const task = c.comparison.task ? html`<p>detection ${measure === 'auc' ? 'ΔAUC' : 'Δd′'} (${measureWords(measure)}): A ${sgn(c.comparison.task.a, digits)}, B ${sgn(c.comparison.task.b, digits)}${c.comparison.task.separated ? ' (bootstrap intervals do not overlap)' : ' (within the bootstrap spread)'}</p>` : '';
    return html`<h3>${c.name}</h3>${comparisonTable(c.comparison, labels)}${task}`;
  });
  return { id: 'schemes', heading: 'Scheme comparisons', body: html`${body}` };
}

async function sweepSections(sweep: SweepResult, name: string, index: number, charts: ChartRenderer, short: (name: string) => string = (n) => n): Promise<PageSection[]> {
  // charts name sites by their short labels (full names in the tables' hover titles)
  const shortSites = sweep.sites.map(short);
  const sections: PageSection[] = [];
  const suffix = index > 0 ? ` (${name})` : '';
  const curves = taskCurves(sweep);
  const control = sweep.control;
  const measure = sweepMeasureOf(sweep);
  const controlMeasure = control?.measure === 'auc' ? 'auc' : 'dprime';
  const controlDigits = controlMeasure === 'auc' ? 3 : 2;
  const controlLine = control
    ? html`<p>Control, by ${measureWords(controlMeasure)}: mean ${controlMeasure === 'auc' ? 'ΔAUC' : 'Δd′'} with tuning-based gain ${sgn(control.meanTuning, controlDigits)} vs shuffled ${sgn(control.meanShuffled, controlDigits)} (difference ${sgn(control.difference, controlDigits)}, p = ${fmt(control.pValue, 3)}, ${control.test}).</p>`
    : '';
  const taskFigure = await charts.figure(
    taskCurveSpec(curves.map((p) => ({ ...p, site: short(p.site) })), shortSites, sweep.schemes, measure),
    `Mean change of detection ${measure === 'auc' ? 'ROC area (AUC, threshold-free)' : 'd′ at the fixed threshold'} (modulated − baseline) against strength, averaged over cued categories; one panel per site. The shuffled control is dashed, its band the range over control seeds; the horizontal line is no change.`,
  );
  sections.push({
    id: `sweep${index + 1}-task`,
    heading: `Task performance against strength${suffix}`,
    body: html`<p class="lead">${name}: does the modulation help the detection task, at which site and scheme, and more than the shuffled control?</p>${taskFigure}${controlLine}${row(html`<h3>Best cell per site</h3>${bestCellsTable(sweep)}`, html`<h3>Per site and scheme</h3>${sweepTaskTable(curves, measure)}`)}`,
  });
  const matrix = propagationMatrix(sweep);
  const calibration = calibrationTable(sweep);
  if (matrix.cells.length > 0) {
    const matrixFigure = await charts.figure(
      propagationMatrixSpec(matrix.cells.map((c) => ({ ...c, site: short(c.site), layer: short(c.layer) })), shortSites, sweep.schemes),
      'Mean relative change at every recorded layer (columns, by depth) when modulating each site (rows), log colour scale; the outlined cell is the site itself; each panel shows one scheme at its largest swept strength. Blank: above the site, or no change.',
    );
    const profileFigure = await charts.figure(depthProfileSpec(matrix.cells.map((c) => ({ ...c, site: short(c.site) })), shortSites, sweep.schemes), 'The same cells as depth profiles: relative change against layers below the site, one line per site.');
    sections.push({
      id: `sweep${index + 1}-matrix`,
      heading: `Propagation matrix${suffix}`,
      body: html`<p class="lead">Where a modulation at each site is still visible further down the network.</p>${row(matrixFigure, profileFigure)}${calibration ? html`<h3>Calibration</h3>${calibration}` : ''}`,
    });
  } else {
    sections.push({
      id: `sweep${index + 1}-matrix`,
      heading: `Propagation matrix${suffix}`,
      body: html`<p class="lead">This sweep ran without <code>--depth-profile</code>, so it has no per-layer changes to draw.</p>${calibration ? html`<h3>Calibration</h3>${calibration}` : ''}`,
    });
  }
  return sections;
}

async function agreementSections(inputs: readonly ReportInput[], charts: ChartRenderer): Promise<PageSection | null> {
  const list = inputs.filter((i): i is Extract<ReportInput, { kind: 'agreement' }> => i.kind === 'agreement');
  if (list.length === 0) return null;
  const parts: SafeHtml[] = [];
  for (const input of list) {
    const data = agreementData(input.agreement);
    const trend = input.agreement.depthTrend;
    const trendText = Number.isFinite(num(trend?.slope)) ? `dashed: least-squares trend of pooled r, ${sgn(trend.slope, 4)} per depth step (r = ${fmt(trend.r, 2)}, ${fmt(trend.n, 0)} layers)` : 'too few layers for a trend';
    const figure = await charts.figure(
      depthLinesSpec(data.values, { yDomain: [-1, 1], yTitle: 'agreement across channels', measures: ['Pearson r', 'Spearman ρ'], colours: [PALETTE[0]!, PALETTE[3]!], trend: data.trend, trendLabel: 'trend' }),
      html`Pooled correlation between a channel's tuning value and its sensitivity (all channels × categories of a layer) against depth; ${trendText}.`,
    );
    const unmatched = input.agreement.unmatched?.length ? html`<p class="note">not in the tuning table: ${input.agreement.unmatched.join(', ')}</p>` : '';
    parts.push(html`${list.length > 1 ? html`<h3>${input.name}</h3>` : ''}${pair(figure, html`${agreementTable(input.agreement)}${unmatched}`)}`);
  }
  return { id: 'agreement', heading: 'Tuning and sensitivity', body: html`<p class="lead">Do the channels that respond to a category also drive its readout, and does that agreement grow with depth?</p>${parts}` };
}

async function tuningSections(inputs: readonly ReportInput[], charts: ChartRenderer): Promise<PageSection | null> {
  const list = inputs.filter((i): i is Extract<ReportInput, { kind: 'tuning' }> => i.kind === 'tuning');
  if (list.length === 0) return null;
  const parts: SafeHtml[] = [];
  for (const input of list) {
    const figure = await charts.figure(
      depthLinesSpec(tuningData(input.tuning), { yDomain: [0, 1], yTitle: 'fraction / index', measures: [selectiveMeasure(input.tuning), 'mean selectivity index'], colours: [PALETTE[2]!, PALETTE[6]!] }),
      `Category tuning across depth: fraction of ${unitWords(input.tuning.layers.map((l) => l.unit)).many} whose preferred category drives them at least twice as strongly as the others${Number.isFinite(num(input.tuning.selectiveIndex)) ? ` (index ≥ ${fmt(input.tuning.selectiveIndex, 2)})` : ''}, and the mean selectivity index.`,
    );
    parts.push(html`${list.length > 1 ? html`<h3>${input.name}</h3>` : ''}${pair(figure, tuningTable(input.tuning))}`);
  }
  return { id: 'tuning', heading: 'Tuning across depth', body: html`${parts}` };
}

function verdictSection(inputs: readonly ReportInput[], runs: ReturnType<typeof diffRuns>): PageSection | null {
  const lines: SafeHtml[] = [];
  for (const r of runs) if (r.diff.verdict) lines.push(html`<li><span class="name">${r.label}</span>: ${r.diff.verdict}</li>`);
  for (const i of inputs) {
    if (i.kind === 'comparison' && i.comparison.verdict) lines.push(html`<li><span class="name">${i.name}</span> (A vs B): ${i.comparison.verdict}</li>`);
    if (i.kind === 'sweep') {
      if (i.sweep.summary) lines.push(html`<li><span class="name">${i.name}</span>: ${i.sweep.summary}</li>`);
      for (const b of i.sweep.best ?? []) lines.push(html`<li><span class="name">${b.site}</span>: best by ${measureWords(sweepMeasureOf(i.sweep))}: ${b.scheme} at strength ${fmt(b.strength, 2)}, ΔAUC ${sgn(b.aucChange, 3)}, Δd′ ${sgn(b.dPrimeChange)}, activity change at the site ${pct(b.siteActivityChange)}</li>`);
    }
    if (i.kind === 'agreement' && Number.isFinite(num(i.agreement.depthTrend?.slope))) {
      lines.push(html`<li><span class="name">${i.name}</span>: pooled tuning–sensitivity r changes by ${sgn(i.agreement.depthTrend.slope, 4)} per depth step</li>`);
    }
  }
  if (lines.length === 0) return null;
  return { id: 'verdicts', heading: 'Verdicts', body: html`<ul class="verdicts">${lines}</ul>` };
}

/** Every layer and site name the inputs mention, for one set of short labels across the page. */
function namesOf(inputs: readonly ReportInput[], runs: ReturnType<typeof diffRuns>): string[] {
  const names = new Set<string>();
  for (const r of runs) for (const l of r.diff.layers) names.add(l.name);
  for (const i of inputs) {
    if (i.kind === 'size-matched') for (const e of i.comparison.effects) for (const site of e.site.split('+')) names.add(site);
    if (i.kind === 'sweep') for (const site of i.sweep.sites) names.add(site);
    if (i.kind === 'agreement') for (const l of i.agreement.layers) names.add(l.layer);
  }
  return [...names];
}

/** The headline block: from the first size-matched comparison, else the first diff, else the first sweep. */
function headlineBlock(inputs: readonly ReportInput[], runs: ReturnType<typeof diffRuns>, short: (name: string) => string): SafeHtml | null {
  const sizeMatched = inputs.find((i): i is Extract<ReportInput, { kind: 'size-matched' }> => i.kind === 'size-matched');
  const sweep = inputs.find((i): i is Extract<ReportInput, { kind: 'sweep' }> => i.kind === 'sweep');
  let headline: Headline | null = null;
  if (sizeMatched) headline = sizeMatchedHeadline(sizeMatched.comparison, short);
  else if (runs.length > 0) headline = diffHeadline(runs[0]!.diff, short);
  else if (sweep) headline = sweepHeadline(sweep.sweep, short);
  if (!headline) return null;
  return html`<div class="headline" id="headline"><p>${headline.sentences.join(' ')}</p><p class="caveat-line">${CAVEAT_LINE} <a href="#caveat">What these results are</a></p></div>`;
}

/** The forest plot of one size-matched comparison. */
async function forestFigure(c: SizeMatchedComparison, short: (name: string) => string, charts: ChartRenderer): Promise<SafeHtml> {
  const siteOf = (site: string) => (site.includes('+') ? `all ${site.split('+').length} sites` : short(site));
  const rows = c.effects.map((e) => ({ row: `${siteOf(e.site)} · ${e.scheme}`, site: siteOf(e.site), scheme: e.scheme, estimate: e.aucChange.estimate, low: e.aucChange.low, high: e.aucChange.high }));
  const schemes = [...new Set(c.effects.map((e) => e.scheme))];
  return charts.figure(forestSpec(rows, schemes), `Held-out change in ROC area of every scheme at ${pct(c.size, 0)} modulation size: point = mean over ${c.categories.length} cued categories, bar = 95 % bootstrap interval over the held-out stimuli; the vertical line is no change. A scheme helps detection only where its bar lies right of the line; compare it with the shuffled row of its site (same gains, permuted) and the ceiling (fitted gain of the same size).`, 'forest');
}

function classifyAll(inputs: readonly unknown[], names: readonly string[] | undefined): ReportInput[] {
  return inputs.flatMap((value, i) => (typeof value === 'string' ? readReportInput(value) : classifyReportInput(value, names?.[i] ?? `input ${i + 1}`)));
}

/**
 * Renders the report and says what it holds.
 * @param inputs JSON file paths (strings) or parsed results (objects), in the order they should appear.
 * @param options title; names for object inputs.
 * @returns the HTML, the classified inputs, section headings, chart count and rendering warnings.
 * @throws UsageError when there is no input, or an input is unreadable as JSON or of no known kind
 *   (naming it); RuntimeFailure when a chart cannot be rendered.
 */
export async function buildHtmlReport(inputs: readonly unknown[], options: RenderReportOptions = {}): Promise<HtmlReport> {
  if (inputs.length === 0) throw new UsageError('E_REPORT_INPUT', 'no inputs to report on', { hint: 'pass diff, sweep or tune JSON files' });
  const classified = classifyAll(inputs, options.names);
  const charts = new ChartRenderer();
  const fullRuns = diffRuns(classified);
  const labels = shortLayerLabels(namesOf(classified, fullRuns));
  const short = (name: string) => labels.get(name) ?? name;
  // run labels name their sites by short labels too (distinct names keep distinct labels, so runs stay distinct)
  const renamed = [...labels].filter(([name, label]) => name !== label).sort((a, b) => b[0].length - a[0].length);
  const runs = fullRuns.map((r) => ({ ...r, label: renamed.reduce((text, [name, label]) => text.split(`@ ${name}`).join(`@ ${label}`), r.label) }));
  const sections: PageSection[] = [];
  const sizeMatchedInputs = classified.filter((i): i is Extract<ReportInput, { kind: 'size-matched' }> => i.kind === 'size-matched');
  const forests: SafeHtml[] = [];
  for (const input of sizeMatchedInputs) forests.push(await forestFigure(input.comparison, short, charts));
  const sizeMatched = sizeMatchedSection(sizeMatchedInputs, forests, short);
  if (sizeMatched) sections.push(sizeMatched);
  const verdicts = verdictSection(classified, runs);
  if (verdicts) sections.push(verdicts);
  if (runs.length > 0) sections.push(await propagationSection(runs, charts, short));
  const task = taskSection(runs);
  if (task) sections.push(task);
  for (let k = 0; k < (options.pictures ?? []).length; k++) {
    const pair = options.pictures![k]!;
    const data = await pairPictureData({ base: pair.base, mod: pair.mod, ...(pair.tuning ? { tuning: pair.tuning } : {}), ...(pair.target ? { target: pair.target } : {}) });
    const drawn = await pairPictureSections(data, { idPrefix: `pictures${k + 1}`, title: pair.title });
    sections.push(...drawn.sections);
    charts.warnings.push(...drawn.warnings);
  }
  const comparisons = comparisonSection(classified);
  if (comparisons) sections.push(comparisons);
  const sweeps = classified.filter((i): i is Extract<ReportInput, { kind: 'sweep' }> => i.kind === 'sweep');
  for (let k = 0; k < sweeps.length; k++) sections.push(...(await sweepSections(sweeps[k]!.sweep, sweeps[k]!.name, k, charts, short)));
  const agreement = await agreementSections(classified, charts);
  if (agreement) sections.push(agreement);
  const tuning = await tuningSections(classified, charts);
  if (tuning) sections.push(tuning);
  const title = options.title ?? 'Sonde report';
  const counts = Object.entries(classified.reduce<Record<string, number>>((acc, i) => ({ ...acc, [KIND_NAMES[i.kind]]: (acc[KIND_NAMES[i.kind]] ?? 0) + 1 }), {})).map(([k, n]) => `${n} ${k}${n > 1 ? (k.endsWith('y') ? '' : 's') : ''}`);
  const base = resolve(options.relativeTo ?? '.');
  const text = renderPage({ title, subtitle: `Sonde ${TOOL_VERSION} · ${counts.join(', ')} · ${charts.count} charts`, inputs: inputsTable(classified, base), sections, headline: headlineBlock(classified, runs, short) });
  return { html: text, inputs: classified.map((i) => ({ name: i.name, kind: i.kind })), sections: sections.map((s) => s.heading), charts: charts.count, warnings: charts.warnings };
}

/**
 * Renders the report as one self-contained HTML document (see the module comment).
 * @param inputs JSON file paths or parsed results (diff, scheme comparison, sweep, agreement, tuning).
 * @param options title; names for object inputs.
 * @returns the HTML text.
 * @throws as `buildHtmlReport`.
 */
export async function renderHtmlReport(inputs: readonly unknown[], options: RenderReportOptions = {}): Promise<string> {
  return (await buildHtmlReport(inputs, options)).html;
}

/**
 * Renders the report and writes it to `out`.
 * @param options inputs, out, title, names.
 * @returns what was written: path, bytes, and the report's inputs, sections, charts and warnings.
 * @throws as `buildHtmlReport`; UsageError when `out` exists without `force` or is one of the inputs;
 *   RuntimeFailure when the file cannot be written.
 */
export async function writeHtmlReport(options: WriteReportOptions): Promise<Omit<HtmlReport, 'html'> & { path: string; bytes: number }> {
  assertOutFileWritable(options.out, { force: options.force ?? false, inputs: options.inputs.map((input, i) => ({ option: `input ${i + 1}`, path: typeof input === 'string' ? input : null })) });
  const { html: text, ...rest } = await buildHtmlReport(options.inputs, { relativeTo: dirname(resolve(options.out)), ...options });
  try {
    // a temporary file renamed over the target: a failed write leaves an earlier report as it was
    replaceFile(options.out, text);
  } catch (error) {
    const cause = (error as { cause?: unknown }).cause ?? error;
    throw new RuntimeFailure('E_REPORT_WRITE', `cannot write ${options.out} (${(cause as NodeJS.ErrnoException).code ?? String(cause)})`, { hint: 'check that the folder exists and is writable', cause });
  }
  return { ...rest, path: options.out, bytes: Buffer.byteLength(text) };
}
