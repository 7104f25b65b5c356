/**
 * Terminal print-outs of `tune`: the per-layer tuning summary and the tuning–sensitivity agreement of
 * `tune --against`. Layers are named by short unique labels; tables fit `width` (split into parts that
 * repeat depth and layer). The agreement gives one column per category while they fit in one or two
 * table parts (`MAX_CATEGORY_COLUMNS`); with more categories (an ImageNet readout has 1000) each layer's
 * per-category r is summarised as its median and range, naming the categories at both ends.
 */
import { sparkline } from '../analysis/sparkline.js';
import type { TableComparison } from '../compare/compare-tables.js';
import type { LayerTuningSummary } from '../compare/tune.js';
import { shortLayerLabels } from './layer-labels.js';
import { fitTable, wrapText } from './terminal-table.js';
import { unitCount, unitWords, type UnitName } from './unit-words.js';

/** Most categories shown one column each in the agreement table; more are summarised. */
export const MAX_CATEGORY_COLUMNS = 12;

function number(x: number, digits: number): string {
  return Number.isFinite(x) ? x.toFixed(digits) : 'NaN';
}

/**
 * The per-layer tuning summary table (selective fraction, mean selectivity, flagged channels).
 * @param summaries per-layer summaries.
 * @param options width: terminal columns to fit (default: no limit).
 */
export function renderTuningSummaries(summaries: readonly LayerTuningSummary[], options: { width?: number } = {}): string {
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const labels = shortLayerLabels(summaries.map((s) => s.layer));
  let signed = false;
  const rows = summaries.map((s) => {
    // the index is defined for non-negative responses only; say so instead of printing NaN
    let selectivity = number(s.meanSelectivity, 3);
    if (s.negativeChannels > 0) {
      signed = true;
      selectivity = Number.isFinite(s.meanSelectivity) ? `${selectivity} *` : '– *';
    }
    // token tensors are tuned per feature (over all tokens), attention internals per head: the count says which
    const count = s.unit && s.unit !== 'channels' ? `${s.channels} ${s.unit}` : String(s.channels);
    return [String(s.depth), labels.get(s.layer)!, s.op, count, `${(100 * s.selectiveFraction).toFixed(0)}%`, selectivity, s.zeroVarianceChannels ? String(s.zeroVarianceChannels) : '', s.nonFiniteChannels ? String(s.nonFiniteChannels) : ''];
  });
  const mixed = summaries.some((s) => s.unit && s.unit !== 'channels');
  const table = fitTable(['depth', 'layer', 'op', mixed ? 'units' : 'channels', 'selective', 'mean selectivity', 'zero-variance', 'NaN'], rows, { width, keyColumns: 2 });
  const note = signed ? `\n${wrapText('* channels with a negative mean response to some category have no selectivity index (it needs non-negative responses); the mean is over the others', width, '  ')}` : '';
  return `${table}${note}`;
}

/**
 * The tuning–sensitivity agreement table of `tune --against` with its depth sparkline and trend.
 * @param comparison the table comparison.
 * @param path the sensitivity table as the user named it.
 * @param options width: terminal columns to fit (default: no limit); units: each layer's unit (tune's
 *   summaries), so token layers count features (layers not in it, or no map: channels).
 */
export function renderAgreement(comparison: TableComparison, path: string, options: { width?: number; units?: ReadonlyMap<string, UnitName> } = {}): string {
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const labels = shortLayerLabels(comparison.layers.map((l) => l.layer));
  const many = comparison.categories.length > MAX_CATEGORY_COLUMNS;
  const words = unitWords(comparison.layers.map((l) => options.units?.get(l.layer)));
  const head = ['depth', 'layer', words.many, 'pooled r', 'pooled ρ'];
  if (many) head.push('median r', 'lowest r', 'highest r');
  else head.push(...comparison.categories.map((c) => `r ${c}`));
  const rows = comparison.layers.map((l) => {
    const row = [String(l.depth), labels.get(l.layer)!, unitCount(l.channels, options.units?.get(l.layer), words), number(l.pooled.pearson, 3), number(l.pooled.spearman, 3)];
    if (!many) return [...row, ...l.byCategory.map((c) => number(c.pearson, 2))];
    const finite = l.byCategory.filter((c) => Number.isFinite(c.pearson)).sort((a, b) => a.pearson - b.pearson);
    if (finite.length === 0) return [...row, '–', '–', '–'];
    const middle = finite.length % 2 === 1 ? finite[(finite.length - 1) / 2]!.pearson : (finite[finite.length / 2 - 1]!.pearson + finite[finite.length / 2]!.pearson) / 2;
    return [...row, number(middle, 2), `${number(finite[0]!.pearson, 2)} ${finite[0]!.category}`, `${number(finite[finite.length - 1]!.pearson, 2)} ${finite[finite.length - 1]!.category}`];
  });
  const pooled = comparison.layers.map((l) => l.pooled.pearson);
  const trend = comparison.depthTrend;
  const lines = [
    wrapText(`tuning vs sensitivity (${path}; sensitivities ${comparison.sensitivityScale === 'normalised' ? 'z-scored across categories' : 'raw, one shared category'})`, width, '  '),
    fitTable(head, rows, { width, keyColumns: 2 }),
  ];
  if (many) lines.push(wrapText(`${comparison.categories.length} categories: per-category Pearson r summarised per layer (median, and the lowest and highest with their category); --json lists every one`, width, '  '));
  lines.push(wrapText(`pooled r across depth: ${sparkline(pooled, { min: -1, max: 1 })}${Number.isFinite(trend.slope) ? `  trend ${trend.slope >= 0 ? '+' : ''}${trend.slope.toPrecision(3)} per depth step` : ''}`, width, '  '));
  if (comparison.unmatched.length > 0) lines.push(wrapText(`not in the tuning table: ${comparison.unmatched.join(', ')}`, width, '  '));
  return lines.join('\n');
}
