/**
 * The numbers each report chart draws, taken from the inputs: pure functions, plain rows out. Kept apart
 * from the chart specs so the aggregation (means over cued categories and control seeds, the seed range
 * of the shuffled control, which strength a matrix shows) is tested on its own.
 */
import { basename } from 'node:path';
import type { TableComparison } from '../../compare/compare-tables.js';
import type { DiffReport } from '../../compare/diff-types.js';
import { tokensLabel, windowLabel } from '../../modulation/label.js';
import type { SweepCell, SweepResult } from '../../replay/sweep-types.js';
import { num, type TuningSummaries } from './inputs.js';
import { unitWords } from '../unit-words.js';

/** One layer of one diff run, for the relative-change-vs-depth chart. */
export interface ChangePoint {
  /** The run's label (see `runLabel`). */
  series: string;
  layer: string;
  depth: number;
  /** Relative change ‖b − a‖/‖a‖; null where it cannot be drawn on a log axis (≤ 0 or not finite). */
  relativeChange: number | null;
  /** Noise floor of the layer; null where it is ≤ 0 or not finite. */
  floor: number | null;
  site: boolean;
}

/** What the relative-change chart draws. */
export interface RelativeChangeData {
  /** Run labels in input order (unique). */
  series: string[];
  points: ChangePoint[];
  /** Layers whose relative change is 0 or not finite (not drawable on a log axis; e.g. everything above the site). */
  omitted: number;
  /** Log-axis range: the drawable changes widened to whole decades; null when nothing is drawable. */
  range: [number, number] | null;
  /** Whether any floor lies inside `range` (else the floors are not drawn and the caption says so). */
  floorInRange: boolean;
  /** The largest floor of any layer (NaN when none is positive). */
  floorMax: number;
}

interface ModulationSource {
  kind?: unknown;
  site?: unknown;
  strength?: unknown;
  target?: unknown;
  /** Kind-specific details of a resolved modulation record (strength, target, …). */
  details?: { strength?: unknown; target?: unknown };
  /** The spatial window, when the modulation has one. */
  window?: unknown;
}

/**
 * A short label for a diff's modulated run: `kind strength → target @ site` for each recorded modulation
 * (as far as the manifest's resolved records say: strength and target live in their `details`), else the
 * modulated folder's base name.
 * @param diff a diff report.
 * @returns the label (plain text; escaped wherever it is shown).
 */
export function runLabel(diff: DiffReport): string {
  const modulation = diff.mod?.modulation as { modulations?: ModulationSource[] } | null | undefined;
  const parts = (Array.isArray(modulation?.modulations) ? modulation!.modulations : []).map((m) => {
    const strength = m.details?.strength ?? m.strength;
    const target = m.details?.target ?? m.target;
    const words: string[] = [];
    if (typeof m.kind === 'string') words.push(m.kind);
    if (typeof strength === 'number') words.push(`${strength}`);
    if (typeof target === 'string') words.push(`→ ${target}`);
    if (typeof m.site === 'string') words.push(`@ ${m.site}`);
    const window = windowLabel(m.window) ?? tokensLabel((m as { tokens?: unknown }).tokens);
    if (window !== null) words.push(`in ${window}`);
    return words.join(' ');
  }).filter((p) => p.length > 0);
  if (parts.length > 0) return parts.join(' + ');
  return typeof diff.mod?.folder === 'string' ? basename(diff.mod.folder) : 'modulated run';
}

/**
 * Makes labels unique by appending ` (2)`, ` (3)`… to repeats, in order.
 * @param labels labels, possibly repeated.
 * @returns labels of the same length, all different.
 */
export function uniqueLabels(labels: readonly string[]): string[] {
  const seen = new Map<string, number>();
  const taken = new Set(labels);
  return labels.map((label) => {
    const count = (seen.get(label) ?? 0) + 1;
    seen.set(label, count);
    if (count === 1) return label;
    let candidate = `${label} (${count})`;
    for (let k = count + 1; taken.has(candidate); k++) candidate = `${label} (${k})`;
    taken.add(candidate);
    return candidate;
  });
}

/**
 * Rows of the relative-change-vs-depth chart: one per layer and run.
 * @param runs labelled diff reports (labels must be unique).
 * @returns the rows, the labels, and how many layers had nothing to draw.
 * Edge cases: a relative change of 0 (layers above the site) or NaN/Inf is null in its row and counted in
 * `omitted`; a floor ≤ 0 is null. The axis range spans whole decades around the drawable changes only,
 * so a floor far below them (float roundoff, ~1e-7) does not squash the lines; `floorInRange` says
 * whether any floor falls inside it.
 */
export function relativeChangeData(runs: ReadonlyArray<{ label: string; diff: DiffReport }>): RelativeChangeData {
  const points: ChangePoint[] = [];
  let omitted = 0;
  for (const { label, diff } of runs) {
    for (const layer of diff.layers) {
      const change = num(layer.relativeChange);
      const floor = num(layer.floor);
      const drawable = change > 0 && Number.isFinite(change);
      if (!drawable) omitted++;
      points.push({ series: label, layer: layer.name, depth: num(layer.depth), relativeChange: drawable ? change : null, floor: floor > 0 && Number.isFinite(floor) ? floor : null, site: layer.site === true });
    }
  }
  const changes = points.map((p) => p.relativeChange).filter((v): v is number => v !== null);
  const floors = points.map((p) => p.floor).filter((v): v is number => v !== null);
  const range: [number, number] | null = changes.length === 0 ? null : [10 ** Math.floor(Math.log10(Math.min(...changes))), 10 ** Math.ceil(Math.log10(Math.max(...changes)))];
  if (range && range[0] === range[1]) range[1] = range[0] * 10;
  const floorInRange = range !== null && floors.some((f) => f >= range[0] && f <= range[1]);
  return { series: runs.map((r) => r.label), points, omitted, range, floorInRange, floorMax: floors.length > 0 ? Math.max(...floors) : Number.NaN };
}

/** One point of task performance against strength: a site × scheme × strength of a sweep. */
export interface TaskCurvePoint {
  site: string;
  scheme: string;
  strength: number;
  /** Mean d′ change over every cell of the point (cued categories × control seeds). */
  dPrimeChange: number;
  /** Mean accuracy change (percentage points) over the same cells. */
  accuracyPp: number;
  /** Smallest and largest per-seed mean d′ change (the spread of the shuffled control across seeds; equal to the mean with one seed). */
  low: number;
  high: number;
  /** Mean ROC-area change over the same cells (NaN for sweeps written before cells had it). */
  aucChange: number;
  /** Smallest and largest per-seed mean ROC-area change. */
  aucLow: number;
  aucHigh: number;
  /** Mean hit-rate change at the baseline's false-alarm rate, pp. */
  matchedHitRatePp: number;
  /** Cells averaged. */
  cells: number;
}

function mean(values: readonly number[]): number {
  let sum = 0;
  for (let i = 0; i < values.length; i++) sum += values[i]!;
  return values.length === 0 ? Number.NaN : sum / values.length;
}

/** Groups items by a key, keeping first-seen order. */
function groupBy<T>(items: readonly T[], key: (item: T) => string): Map<string, T[]> {
  const groups = new Map<string, T[]>();
  for (const item of items) {
    const k = key(item);
    const list = groups.get(k);
    if (list) list.push(item);
    else groups.set(k, [item]);
  }
  return groups;
}

function orderOf(list: readonly string[]): (value: string) => number {
  const index = new Map(list.map((v, i) => [v, i]));
  return (value) => index.get(value) ?? list.length;
}

/**
 * Task performance against strength: per site, scheme and strength, the mean d′ and accuracy change over
 * cued categories and control seeds, and the range of the per-seed means.
 * @param sweep a sweep result.
 * @returns points sorted by site (sweep order), scheme (sweep order), then strength.
 * Edge cases: a cell whose d′ change is null/NaN makes its point's mean NaN (shown as a gap, never dropped).
 */
export function taskCurves(sweep: SweepResult): TaskCurvePoint[] {
  const siteOrder = orderOf(sweep.sites);
  const schemeOrder = orderOf(sweep.schemes);
  const groups = groupBy(sweep.cells, (c) => JSON.stringify([c.site, c.scheme, num(c.strength)]));
  const points: TaskCurvePoint[] = [];
  for (const cells of groups.values()) {
    const first = cells[0]!;
    const seeds = [...groupBy(cells, (c) => String(num(c.seed))).values()];
    const seedMeans = seeds.map((group) => mean(group.map((c) => num(c.change.dPrime))));
    const seedAucMeans = seeds.map((group) => mean(group.map((c) => num(c.change.auc))));
    points.push({
      site: first.site,
      scheme: first.scheme,
      strength: num(first.strength),
      dPrimeChange: mean(cells.map((c) => num(c.change.dPrime))),
      accuracyPp: mean(cells.map((c) => num(c.change.accuracyPp))),
      low: Math.min(...seedMeans),
      high: Math.max(...seedMeans),
      aucChange: mean(cells.map((c) => num(c.change.auc))),
      aucLow: Math.min(...seedAucMeans),
      aucHigh: Math.max(...seedAucMeans),
      matchedHitRatePp: mean(cells.map((c) => num(c.change.matchedHitRatePp))),
      cells: cells.length,
    });
  }
  points.sort((p, q) => siteOrder(p.site) - siteOrder(q.site) || schemeOrder(p.scheme) - schemeOrder(q.scheme) || p.strength - q.strength);
  return points;
}

/** One cell of the site × depth propagation matrix. */
export interface MatrixCell {
  site: string;
  scheme: string;
  /** The strength shown for this scheme (see `propagationMatrix`). */
  strength: number;
  layer: string;
  depth: number;
  belowSite: number;
  /** Mean relative change at the layer over cued categories and control seeds. */
  relativeChange: number;
  /** Mean signature slope at the layer (NaN where no tuning is known). */
  signatureSlope: number;
  /** Sweep cells averaged. */
  cells: number;
}

/**
 * The site × depth propagation matrix from the sweep cells that carry a depth profile: for every scheme
 * the largest strength that has profiles, and for every site and recorded layer at or below it the mean
 * relative change (and signature slope) over cued categories and control seeds at that strength.
 * @param sweep a sweep result.
 * @returns the cells (sites in sweep order, then depth) and the strength shown per scheme; empty when no
 *   cell has a depth profile (the sweep ran without `--depth-profile`).
 */
export function propagationMatrix(sweep: SweepResult): { cells: MatrixCell[]; strengthByScheme: Map<string, number> } {
  const profiled = sweep.cells.filter((c): c is SweepCell & { depthProfile: NonNullable<SweepCell['depthProfile']> } => Array.isArray(c.depthProfile) && c.depthProfile.length > 0);
  const strengthByScheme = new Map<string, number>();
  for (const cell of profiled) {
    const strength = num(cell.strength);
    const previous = strengthByScheme.get(cell.scheme);
    if (previous === undefined || strength > previous) strengthByScheme.set(cell.scheme, strength);
  }
  const chosen = profiled.filter((c) => num(c.strength) === strengthByScheme.get(c.scheme));
  const rows = chosen.flatMap((cell) => cell.depthProfile.map((point) => ({ cell, point })));
  const groups = groupBy(rows, ({ cell, point }) => JSON.stringify([cell.site, cell.scheme, point.layer]));
  const siteOrder = orderOf(sweep.sites);
  const schemeOrder = orderOf(sweep.schemes);
  const cells: MatrixCell[] = [];
  for (const group of groups.values()) {
    const { cell, point } = group[0]!;
    cells.push({
      site: cell.site,
      scheme: cell.scheme,
      strength: num(cell.strength),
      layer: point.layer,
      depth: num(point.depth),
      belowSite: num(point.belowSite),
      relativeChange: mean(group.map((g) => num(g.point.relativeChange))),
      signatureSlope: mean(group.map((g) => num(g.point.signatureSlope))),
      cells: group.length,
    });
  }
  cells.sort((p, q) => schemeOrder(p.scheme) - schemeOrder(q.scheme) || siteOrder(p.site) - siteOrder(q.site) || p.depth - q.depth);
  return { cells, strengthByScheme };
}

/** One value of a per-layer line chart against depth. */
export interface DepthValue {
  layer: string;
  depth: number;
  /** Which line (e.g. `Pearson r`). */
  measure: string;
  value: number;
}

/**
 * Pooled tuning–sensitivity agreement against depth: Pearson r and Spearman ρ per layer, and the fitted
 * trend line of pooled r against depth over the layers' depth range.
 * @param agreement a table comparison.
 * @returns the values (layers with unknown depth, −1, left out) and the trend's end points, or null
 *   when the trend is undefined (fewer than two layers).
 */
export function agreementData(agreement: TableComparison): { values: DepthValue[]; trend: Array<{ depth: number; value: number }> | null } {
  const values: DepthValue[] = [];
  const known = agreement.layers.filter((l) => num(l.depth) >= 0);
  for (const l of known) {
    values.push({ layer: l.layer, depth: num(l.depth), measure: 'Pearson r', value: num(l.pooled.pearson) });
    values.push({ layer: l.layer, depth: num(l.depth), measure: 'Spearman ρ', value: num(l.pooled.spearman) });
  }
  const slope = num(agreement.depthTrend?.slope);
  const intercept = num(agreement.depthTrend?.intercept);
  if (!Number.isFinite(slope) || !Number.isFinite(intercept) || known.length < 2) return { values, trend: null };
  const depths = known.map((l) => num(l.depth));
  const lo = Math.min(...depths);
  const hi = Math.max(...depths);
  return { values, trend: [{ depth: lo, value: intercept + slope * lo }, { depth: hi, value: intercept + slope * hi }] };
}

/** The name of the selective-fraction measure: "selective channels (fraction)", features at token layers, units when mixed (unit-words.ts). */
export function selectiveMeasure(tuning: TuningSummaries): string {
  return `selective ${unitWords(tuning.layers.map((l) => l.unit)).many} (fraction)`;
}

/**
 * Category tuning against depth: the fraction of selective channels and the mean selectivity per layer.
 * @param tuning tuning summaries.
 * @returns two values per layer with a known depth (≥ 0).
 */
export function tuningData(tuning: TuningSummaries): DepthValue[] {
  const selective = selectiveMeasure(tuning);
  return tuning.layers.filter((l) => num(l.depth) >= 0).flatMap((l) => [
    { layer: l.layer, depth: num(l.depth), measure: selective, value: num(l.selectiveFraction) },
    { layer: l.layer, depth: num(l.depth), measure: 'mean selectivity index', value: num(l.meanSelectivity) },
  ]);
}
