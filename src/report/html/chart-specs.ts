/**
 * The vega-lite specs of the report's charts, built from the rows of `chart-data.ts`. Every string from
 * an input (layer, site, category, run label) enters a spec only as a data value or a scale-domain entry,
 * never as a field name or inside an expression, so it cannot change what the spec means; vega escapes it
 * when it writes the SVG. Titles live in the page (HTML captions), not in the charts.
 *
 * Colours are fixed per scheme (`schemeColour`) so a scheme has the same colour in every chart.
 */
import type { TopLevelSpec } from 'vega-lite';
import type { DepthValue, MatrixCell, RelativeChangeData, TaskCurvePoint } from './chart-data.js';

/** The system font stack used by the page and the charts (no web fonts). */
export const FONT_STACK = 'system-ui, -apple-system, Segoe UI, Roboto, Helvetica Neue, Arial, sans-serif';

/** Tableau-10 colours (a common categorical palette), in order. */
export const PALETTE: readonly string[] = ['#4e79a7', '#f28e2b', '#59a14f', '#e15759', '#76b7b2', '#edc948', '#b07aa1', '#ff9da7', '#9c755f', '#bab0ac'];

const SCHEME_COLOURS: Readonly<Record<string, string>> = { tuning: '#4e79a7', sensitivity: '#f28e2b', uniform: '#59a14f', shuffled: '#8c8c8c' };

/**
 * Colour of a sweep scheme: fixed for `tuning`, `sensitivity`, `uniform`, `shuffled`; other schemes take
 * the remaining palette colours in the order given.
 * @param schemes the schemes of the chart, in order.
 * @returns one colour per scheme.
 */
export function schemeColours(schemes: readonly string[]): string[] {
  const spare = PALETTE.filter((c) => !Object.values(SCHEME_COLOURS).includes(c));
  let next = 0;
  return schemes.map((s) => SCHEME_COLOURS[s] ?? spare[next++ % spare.length]!);
}

/** Colours for n series, cycling the palette. */
function seriesColours(n: number): string[] {
  return Array.from({ length: n }, (_, i) => PALETTE[i % PALETTE.length]!);
}

const CONFIG = {
  font: FONT_STACK,
  background: 'white',
  padding: 6,
  view: { stroke: '#d5d9de' },
  axis: { labelFontSize: 11, titleFontSize: 12, titleFontWeight: 600, labelColor: '#333', titleColor: '#222', gridColor: '#eceef1', domainColor: '#8a8f96', tickColor: '#8a8f96' },
  legend: { labelFontSize: 11, titleFontSize: 12, titleFontWeight: 600, labelLimit: 420, symbolStrokeWidth: 2 },
  header: { labelFontSize: 12, labelFontWeight: 600, labelColor: '#222', titleFontSize: 12 },
} as const;

/**
 * Relative change against depth, one line per run on a log axis; the site of each run is a diamond
 * labelled "site", the noise floor of each run a thin dashed line in the run's colour.
 * @param data rows from `relativeChangeData`.
 */
export function relativeChangeSpec(data: RelativeChangeData, layerLabels: ReadonlyArray<{ depth: number; label: string }> = []): TopLevelSpec {
  const range = data.range ?? [1e-3, 1];
  const inRange = (v: number) => v >= range[0] && v <= range[1];
  const rows = data.points.flatMap((p) => {
    const out: Array<{ series: string; layer: string; depth: number; part: string; value: number }> = [];
    if (p.relativeChange !== null) out.push({ series: p.series, layer: p.layer, depth: p.depth, part: 'change', value: p.relativeChange });
    if (p.floor !== null && inRange(p.floor)) out.push({ series: p.series, layer: p.layer, depth: p.depth, part: 'floor', value: p.floor });
    if (p.site && p.relativeChange !== null) out.push({ series: p.series, layer: p.layer, depth: p.depth, part: 'site', value: p.relativeChange });
    return out;
  });
  const scale = { domain: data.series, range: seriesColours(data.series.length) };
  const color = { field: 'series', type: 'nominal', scale, legend: { title: 'modulated run', orient: 'bottom', direction: 'vertical', columns: 1, symbolType: 'stroke', symbolStrokeWidth: 3, symbolOpacity: 1, symbolDash: [], labelLimit: 520 } } as const;
  // with layer names (at most 40 distinct positions), the axis names the layers under their positions instead of numbering them
  const named = layerLabels.length > 0 && layerLabels.length <= 40;
  const x = { field: 'depth', type: 'quantitative', title: named ? 'layer, in graph order' : 'graph position (recordable tensors in topological order)', axis: named ? { labels: false, ticks: true, tickMinStep: 1, titlePadding: 96 } : { tickMinStep: 1, format: 'd' } } as const;
  const y = { field: 'value', type: 'quantitative', scale: { type: 'log', domain: range }, title: 'relative change ‖mod − base‖ / ‖base‖', axis: { format: '~g' } } as const;
  const names = named
    ? [{ data: { values: layerLabels.map((l) => ({ depth: l.depth, label: l.label })) }, mark: { type: 'text' as const, angle: 300, align: 'right' as const, baseline: 'middle' as const, fontSize: 10, dy: 0, y: 300 + 10, color: '#333' }, encoding: { x: { field: 'depth', type: 'quantitative' as const }, text: { field: 'label', type: 'nominal' as const } } }]
    : [];
  return {
    width: 480,
    height: 300,
    config: CONFIG,
    data: { values: rows },
    layer: [
      ...names,
      ...(rows.some((r) => r.part === 'floor') ? [{ transform: [{ filter: "datum.part === 'floor'" }], mark: { type: 'line' as const, strokeDash: [3, 3], strokeWidth: 1, opacity: 0.7, clip: true }, encoding: { x, y, color } }] : []),
      { transform: [{ filter: "datum.part === 'change'" }], mark: { type: 'line', strokeWidth: 2, clip: true, point: { filled: true, size: 26 } }, encoding: { x, y, color } },
      { transform: [{ filter: "datum.part === 'site'" }], mark: { type: 'point', shape: 'diamond', size: 190, filled: true, stroke: '#111', strokeWidth: 1, opacity: 1 }, encoding: { x, y, color } },
    ],
  };
}

/**
 * The site × depth propagation matrix: one panel per scheme (at the strength in its header), a row per
 * site, a column per depth, colour the mean relative change on a log scale; the site's own column is
 * outlined.
 * @param cells rows from `propagationMatrix`.
 * @param sites site order (rows).
 * @param schemes scheme order (panels).
 */
export function propagationMatrixSpec(cells: readonly MatrixCell[], sites: readonly string[], schemes: readonly string[]): TopLevelSpec {
  const drawn = cells.filter((c) => c.relativeChange > 0 && Number.isFinite(c.relativeChange));
  const panels = schemes.map((s) => {
    const cell = drawn.find((c) => c.scheme === s);
    return cell ? `${s} · strength ${cell.strength}` : null;
  }).filter((p): p is string => p !== null);
  const rows = drawn.map((c) => ({ panel: `${c.scheme} · strength ${c.strength}`, site: c.site, layer: c.layer, depth: c.depth, belowSite: c.belowSite, value: c.relativeChange }));
  const depths = new Set(rows.map((r) => r.depth)).size;
  const step = Math.max(8, Math.min(28, Math.floor(480 / Math.max(depths, 1))));
  const columns = panels.length > 1 && step * depths <= 560 ? 2 : 1;
  const x = { field: 'depth', type: 'ordinal', title: 'graph position (recordable tensors in topological order)', axis: { labelAngle: 0, labelFontSize: 9, labelOverlap: 'greedy' } } as const;
  const y = { field: 'site', type: 'nominal', sort: [...sites], title: 'site' } as const;
  return {
    config: CONFIG,
    data: { values: rows },
    columns,
    facet: { field: 'panel', type: 'nominal', sort: panels, header: { title: null } },
    spec: {
      width: { step },
      height: { step: 24 },
      layer: [
        { mark: { type: 'rect' }, encoding: { x, y, color: { field: 'value', type: 'quantitative', scale: { type: 'log', scheme: 'viridis' }, legend: { title: 'relative change', orient: 'right', gradientLength: 180, format: '~g', tickCount: 4 } } } },
        { transform: [{ filter: 'datum.layer === datum.site' }], mark: { type: 'rect', fill: null, stroke: '#d62728', strokeWidth: 2 }, encoding: { x, y } },
      ],
    },
  };
}

/**
 * Depth profiles: relative change against layers below the site, one line per site, one panel per scheme.
 * @param cells rows from `propagationMatrix`.
 * @param sites site order (colours).
 * @param schemes scheme order (panels).
 */
export function depthProfileSpec(cells: readonly MatrixCell[], sites: readonly string[], schemes: readonly string[]): TopLevelSpec {
  const drawn = cells.filter((c) => c.relativeChange > 0 && Number.isFinite(c.relativeChange));
  const panelOf = (c: MatrixCell) => `${c.scheme} · strength ${c.strength}`;
  const panels = schemes.map((s) => drawn.find((c) => c.scheme === s)).filter((c): c is MatrixCell => c !== undefined).map(panelOf);
  const present = sites.filter((s) => drawn.some((c) => c.site === s));
  const rows = drawn.map((c) => ({ panel: panelOf(c), site: c.site, belowSite: c.belowSite, value: c.relativeChange }));
  return {
    config: CONFIG,
    data: { values: rows },
    columns: Math.min(panels.length, 2),
    facet: { field: 'panel', type: 'nominal', sort: panels, header: { title: null } },
    spec: {
      width: 280,
      height: 190,
      mark: { type: 'line', strokeWidth: 2, point: { filled: true, size: 22 } },
      encoding: {
        x: { field: 'belowSite', type: 'quantitative', title: 'weight layers below the site', axis: { tickMinStep: 1, format: 'd' } },
        y: { field: 'value', type: 'quantitative', scale: { type: 'log' }, title: 'relative change', axis: { format: '~g' } },
        color: { field: 'site', type: 'nominal', scale: { domain: present, range: seriesColours(present.length) }, legend: { title: 'site', orient: 'right' } },
      },
    },
  };
}

/**
 * Task performance against strength: mean change per scheme in the chosen measure (lines; the shuffled
 * control dashed, with its seed range as a band), one panel per site, and a zero line.
 * @param points rows from `taskCurves`.
 * @param sites site order (panels).
 * @param schemes scheme order (colours).
 * @param measure `auc` (ROC-area change, default) or `dprime` (d′ change at the fixed threshold).
 */
export function taskCurveSpec(points: readonly TaskCurvePoint[], sites: readonly string[], schemes: readonly string[], measure: 'auc' | 'dprime' = 'auc'): TopLevelSpec {
  const present = schemes.filter((s) => points.some((p) => p.scheme === s));
  const panels = sites.filter((s) => points.some((p) => p.site === s));
  const finite = (v: number) => (Number.isFinite(v) ? v : null);
  const rows = points.map((p) => (measure === 'auc'
    ? { site: p.site, scheme: p.scheme, strength: p.strength, value: finite(p.aucChange), low: finite(p.aucLow), high: finite(p.aucHigh) }
    : { site: p.site, scheme: p.scheme, strength: p.strength, value: finite(p.dPrimeChange), low: finite(p.low), high: finite(p.high) }));
  const x = { field: 'strength', type: 'quantitative', title: 'strength' } as const;
  const color = { field: 'scheme', type: 'nominal', scale: { domain: present, range: schemeColours(present) }, legend: { title: 'scheme', orient: 'right', symbolType: 'stroke', symbolStrokeWidth: 3, symbolOpacity: 1 } } as const;
  return {
    config: CONFIG,
    data: { values: rows },
    columns: Math.min(panels.length, 3),
    facet: { field: 'site', type: 'nominal', sort: panels, header: { title: null, labelLimit: 260 } },
    spec: {
      width: 290,
      height: 190,
      layer: [
        { mark: { type: 'rule', color: '#555', strokeWidth: 1 }, encoding: { y: { datum: 0 } } },
        { mark: { type: 'area', opacity: 0.2 }, encoding: { x, y: { field: 'low', type: 'quantitative' }, y2: { field: 'high' }, color } },
        {
          mark: { type: 'line', strokeWidth: 2, point: { filled: true, size: 22 } },
          encoding: {
            x,
            y: { field: 'value', type: 'quantitative', title: measure === 'auc' ? 'ΔAUC vs baseline' : 'Δd′ vs baseline' },
            color,
            strokeDash: { field: 'scheme', type: 'nominal', scale: { domain: present, range: present.map((s) => (s === 'shuffled' ? [5, 3] : [1, 0])) }, legend: { title: 'scheme', orient: 'right', symbolType: 'stroke', symbolStrokeWidth: 3, symbolOpacity: 1 } },
          },
        },
      ],
    },
  };
}

/**
 * Values against depth, one coloured line per measure, with a zero line and an optional dashed trend.
 * Used for tuning–sensitivity agreement (y from −1 to 1) and tuning summaries (0 to 1).
 * @param values rows from `agreementData` / `tuningData`.
 * @param options y range and title, the trend's end points, the measure order and colours.
 */
export function depthLinesSpec(values: readonly DepthValue[], options: { yDomain: [number, number]; yTitle: string; measures: readonly string[]; colours: readonly string[]; trend?: Array<{ depth: number; value: number }> | null; trendLabel?: string }): TopLevelSpec {
  const rows = values.map((v) => ({ layer: v.layer, depth: v.depth, measure: v.measure, value: Number.isFinite(v.value) ? v.value : null }));
  const x = { field: 'depth', type: 'quantitative', title: 'graph position (recordable tensors in topological order)', axis: { tickMinStep: 1, format: 'd' } } as const;
  const y = { field: 'value', type: 'quantitative', scale: { domain: options.yDomain }, title: options.yTitle } as const;
  const trend = options.trend
    ? [{ data: { values: options.trend.map((t) => ({ depth: t.depth, value: t.value, measure: options.trendLabel ?? 'trend' })) }, mark: { type: 'line' as const, strokeDash: [6, 4], strokeWidth: 1.5, color: '#444' }, encoding: { x, y } }]
    : [];
  return {
    width: 520,
    height: 260,
    config: CONFIG,
    layer: [
      { data: { values: [{}] }, mark: { type: 'rule', color: '#555', strokeWidth: 1 }, encoding: { y: { datum: 0, type: 'quantitative', scale: { domain: options.yDomain } } } },
      ...trend,
      {
        data: { values: rows },
        mark: { type: 'line', strokeWidth: 2, point: { filled: true, size: 30 } },
        encoding: { x, y, color: { field: 'measure', type: 'nominal', scale: { domain: [...options.measures], range: [...options.colours] }, legend: { title: null, orient: 'top', direction: 'horizontal' } } },
      },
    ],
  };
}

/** One row of the forest plot: a scheme at a site with its interval. */
export interface ForestRow {
  /** Row label (site · scheme), unique. */
  row: string;
  /** The site as the page names it (short label), for the colour-free grouping. */
  site: string;
  scheme: string;
  estimate: number;
  low: number;
  high: number;
}

/**
 * Forest plot of the size-matched comparison: one row per site × scheme, the held-out ΔAUC as a point
 * with its 95 % interval as a bar, a solid line at zero (no change); colours per scheme as elsewhere.
 * @param rows the rows, in display order (top first).
 * @param schemes scheme order (colours).
 */
export function forestSpec(rows: readonly ForestRow[], schemes: readonly string[]): TopLevelSpec {
  const values = rows.map((r) => ({ ...r, estimate: Number.isFinite(r.estimate) ? r.estimate : null, low: Number.isFinite(r.low) ? r.low : null, high: Number.isFinite(r.high) ? r.high : null }));
  const y = { field: 'row', type: 'nominal', sort: rows.map((r) => r.row), title: null, axis: { labelLimit: 180 } } as const;
  // the row labels name the scheme: no legend (it would make the chart wider than a phone)
  const color = { field: 'scheme', type: 'nominal', scale: { domain: [...schemes], range: schemeColours(schemes) }, legend: null } as const;
  return {
    width: 300,
    height: { step: 22 },
    config: CONFIG,
    data: { values },
    layer: [
      { mark: { type: 'rule', color: '#333', strokeWidth: 1.2 }, encoding: { x: { datum: 0, type: 'quantitative' } } },
      { mark: { type: 'rule', strokeWidth: 2.5 }, encoding: { y, x: { field: 'low', type: 'quantitative', title: 'held-out ΔAUC, 95 % interval' }, x2: { field: 'high' }, color } },
      { mark: { type: 'point', filled: true, size: 60, opacity: 1 }, encoding: { y, x: { field: 'estimate', type: 'quantitative' }, color } },
    ],
  };
}
