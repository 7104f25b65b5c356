import { sparkline } from '../analysis/sparkline.js';
import type { DiffReport, SchemeComparison } from '../compare/diff-types.js';
import { bar, compact, csvField, fixed, signed } from '../format.js';
import { shortLayerLabels } from './layer-labels.js';
import { fitTable, NARROW_COLUMNS, wrapText } from './terminal-table.js';
import { unitWords } from './unit-words.js';

/** Bar length for a relative change on a log scale between the floor and the largest change. */
function logBar(value: number, low: number, high: number): string {
  if (!(value > 0) || !(high > low)) return '';
  return bar((Math.log10(Math.max(value, low)) - Math.log10(low)) / (Math.log10(high) - Math.log10(low)));
}

/** Layers that lie above the site and are unchanged (the baseline's own files, or a change of 0): folded into one row. */
function unchangedAbove(layer: DiffReport['layers'][number]): boolean {
  return !layer.site && !(layer.downstream ?? layer.belowSite > 0) && (layer.unchanged || layer.relativeChange === 0);
}

/**
 * The per-layer terminal table of a diff, a depth-profile sparkline, the task table and the verdict.
 * Layers are named by short unique labels (the site's full name is given under the table; `--json` has
 * all); runs of unchanged layers above the site are folded into one row; tables wider than
 * `options.width` are split into parts that repeat the depth and layer columns (the category for the
 * task table), and text lines are wrapped to it. Below `NARROW_COLUMNS` the op column is left out.
 * @param report the diff.
 * @param options width: terminal columns to fit (default: no limit).
 */
export function renderDiffReport(report: DiffReport, options: { width?: number } = {}): string {
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const narrow = width < NARROW_COLUMNS;
  const labels = shortLayerLabels(report.layers.map((l) => l.name));
  const withSignature = report.layers.some((l) => l.signature);
  const head = ['depth', 'layer', 'op', 'rel. change', 'profile', 'cosine', 'ratio', 'up/down', 'effect'];
  if (withSignature) head.push('slope', 'intercept', 'match');
  head.push('floor');
  const table: string[][] = [];
  let folded: Array<DiffReport['layers'][number]> = [];
  const flush = (): void => {
    if (folded.length === 0) return;
    const first = folded[0]!;
    const last = folded[folded.length - 1]!;
    const row = [folded.length > 1 ? `${first.depth}–${last.depth}` : `${first.depth}`, folded.length > 1 ? `${folded.length} layers above` : labels.get(first.name)!, '', '0', '', '', '', '', ''];
    if (withSignature) row.push('', '', '');
    row.push(folded.every((l) => l.unchanged) ? 'same file' : 'unchanged');
    table.push(row);
    folded = [];
  };
  const changes = report.layers.map((l) => l.relativeChange).filter((v) => v > 0 && Number.isFinite(v));
  const high = Math.max(...changes, 1e-30);
  const low = Math.max(Math.min(...changes, high), high * 1e-6, ...report.layers.map((l) => l.floor)) / 10;
  for (const layer of report.layers) {
    if (unchangedAbove(layer)) {
      folded.push(layer);
      continue;
    }
    flush();
    const ci = layer.relativeChangeCi ? ` [${compact(layer.relativeChangeCi[0])}, ${compact(layer.relativeChangeCi[1])}]` : '';
    const row = [
      `${layer.depth}${layer.site ? ' ◆' : ''}`,
      labels.get(layer.name)!,
      layer.op,
      `${compact(layer.relativeChange)}${ci}`,
      logBar(layer.relativeChange, low, high),
      fixed(layer.cosine, 4),
      layer.signedLayer ? 'signed' : `${fixed(layer.channelRatioMean)} ±${fixed(layer.channelRatioSd, 2)}`,
      `${fixed(layer.fractionUp * 100, 0)}/${fixed(layer.fractionDown * 100, 0)}%`,
      fixed(layer.effectSize, 2),
    ];
    if (withSignature) {
      const s = layer.signature;
      row.push(s ? `${fixed(s.slope)}${s.ci ? ` [${fixed(s.ci.slope[0])}, ${fixed(s.ci.slope[1])}]` : ''}` : '', s ? fixed(s.intercept) : '', s ? `${fixed(s.featureMatchingFraction * 100, 0)}%` : '');
    }
    row.push(layer.unchanged ? 'same file' : layer.nonFinite.base + layer.nonFinite.mod > 0 ? 'non-finite' : layer.aboveFloor ? 'above' : 'below');
    table.push(row);
  }
  flush();
  // the op column repeats what a short label usually ends with (Relu, MaxPool): narrow layouts leave it out
  const shown = narrow ? head.map((_, i) => i).filter((i) => i !== 2) : head.map((_, i) => i);
  const lines = [fitTable(shown.map((i) => head[i]!), table.map((r) => shown.map((i) => r[i]!)), { width, keyColumns: 2 })];
  const siteNames = report.layers.filter((l) => l.site).map((l) => (labels.get(l.name) === l.name ? l.name : `${labels.get(l.name)} = ${l.name}`));
  if (siteNames.length > 0) lines.push(`◆ site ${siteNames.join(', ')}`);
  const below = report.layers.filter((l) => l.site || l.downstream);
  const unit = report.depthUnit ?? 'recorded layers';
  lines.push(`depth profile from the site (log relative change): ${sparkline(below.map((l) => (l.relativeChange > 0 ? Math.log10(l.relativeChange) : Number.NaN)))}  rate ${fixed(report.depthProfile.rate)} per ${unit.replace(/s$/, '')} below the site, r² ${fixed(report.depthProfile.r2, 2)}`);
  lines.push(diffTableFooter(report, withSignature));
  if (report.task) {
    const taskHead = ['category', 'threshold', 'AUC', 'ΔAUC [95% CI]', 'ΔH at base F', 'hit rate', 'false alarms', "d′", 'criterion', 'accuracy', "Δd′ [95% CI]", 'Δaccuracy', narrow ? 'shift only: ΔH, Δd′' : 'criterion shift only: ΔH, Δd′'];
    const task: string[][] = [];
    const rows = report.task.categories.map((c) => ({ name: c.category, threshold: fixed(c.threshold, 2), base: c.base, mod: c.mod, change: c.change, ci: c.ci, auc: c.auc, matched: c.matchedHitRatePp, matchedRange: c.matchedHitRateRangePp, control: c.criterionControl }));
    rows.push({ name: 'mean', threshold: '', base: report.task.base, mod: report.task.mod, change: report.task.change, ci: report.task.ci, auc: report.task.auc, matched: report.task.matchedHitRatePp, matchedRange: report.task.matchedHitRateRangePp, control: { shift: Number.NaN, ...report.task.criterionControl } });
    for (const r of rows) {
      task.push([
        r.name,
        r.threshold,
        `${fixed(r.auc.base, 3)} → ${fixed(r.auc.mod, 3)}`,
        `${signed(r.auc.change, 3)}${r.auc.ci ? ` [${fixed(r.auc.ci[0], 3)}, ${fixed(r.auc.ci[1], 3)}]` : ''}`,
        `${signed(r.matched, 1)} pp${matchedRangeText(r.matchedRange)}`,
        `${fixed(r.base.hitRate)} → ${fixed(r.mod.hitRate)}`,
        `${fixed(r.base.falseAlarmRate)} → ${fixed(r.mod.falseAlarmRate)}`,
        `${fixed(r.base.dPrime, 2)} → ${fixed(r.mod.dPrime, 2)}`,
        `${fixed(r.base.criterion, 2)} → ${fixed(r.mod.criterion, 2)}`,
        `${fixed(r.base.accuracy * 100, 1)}% → ${fixed(r.mod.accuracy * 100, 1)}%`,
        `${signed(r.change.dPrime)}${r.ci ? ` [${fixed(r.ci.dPrime[0], 2)}, ${fixed(r.ci.dPrime[1], 2)}]` : ''}`,
        `${signed(r.change.accuracyPp, 1)} pp`,
        `${signed(r.control.hitRatePp, 1)} pp, ${signed(r.control.dPrime)}`,
      ]);
    }
    lines.push('', `task: detection from "${report.task.readout}"${report.task.readoutMap ? ` grouped by readout map ${report.task.readoutMap.name} (log-sum-exp of each category's units)` : ''} (${report.task.thresholdRule}); rates base → modulated`, fitTable(taskHead, task, { width, keyColumns: 1 }));
    lines.push("AUC: ROC area of the readout (threshold-free); ΔH at base F: hit-rate change at the baseline's false-alarm rate; criterion shift only: the baseline shifted by a constant to the modulated false-alarm rate");
  }
  lines.push('', `verdict: ${report.verdict}`);
  // tables are fitted already; text lines are wrapped to the width, continuation lines indented
  return `${lines.map((line) => (line.includes('\n') ? line : wrapText(line, width, '  '))).join('\n')}\n`;
}

/**
 * Side-by-side table of two schemes against the same baseline: columns A and B (named on the lines above
 * the table), layers by short labels, fitted to `options.width` like `renderDiffReport`.
 * @param comparison the comparison.
 * @param labels what A and B are (the CLI passes the two modulated folders).
 * @param options width: terminal columns to fit (default: no limit).
 */
export function renderComparison(comparison: SchemeComparison, labels: [string, string] = ['A', 'B'], options: { width?: number } = {}): string {
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const names = shortLayerLabels(comparison.layers.map((l) => l.name));
  const rows = comparison.layers.map((l, i) => {
    const a = comparison.a.layers[i]!;
    return [`${l.depth}${a.site || comparison.b.layers[i]!.site ? ' ◆' : ''}`, names.get(l.name)!, compact(l.a), compact(l.b), l.larger === 'equal' ? '=' : l.larger === 'a' ? 'A' : 'B', l.separated ? 'yes' : 'no'];
  });
  const table = fitTable(['depth', 'layer', 'rel. change A', 'rel. change B', 'larger', 'beyond spread'], rows, { width, keyColumns: 2 });
  const lines = [`A = ${labels[0]}${labels[0] === comparison.a.mod.folder ? '' : ` (${comparison.a.mod.folder})`}`, `B = ${labels[1]}${labels[1] === comparison.b.mod.folder ? '' : ` (${comparison.b.mod.folder})`}`, table];
  if (comparison.task) {
    const digits = comparison.task.measure === 'auc' ? 3 : 2;
    lines.push(`detection ${comparison.task.measure === 'auc' ? 'ΔAUC (threshold-free)' : 'Δd′ (fixed threshold)'}: A ${signed(comparison.task.a, digits)}, B ${signed(comparison.task.b, digits)}`);
  }
  lines.push(`verdict A: ${comparison.a.verdict}`, `verdict B: ${comparison.b.verdict}`, `comparison: ${comparison.verdict}`);
  return `${lines.map((line) => (line.includes('\n') ? line : wrapText(line, width, '  '))).join('\n')}\n`;
}

/** One CSV row per layer, for spreadsheets. */
export function diffToCsv(report: DiffReport): string {
  const header = ['depth', 'layer', 'op', 'site', 'below_site', 'relative_change', 'relative_change_low', 'relative_change_high', 'relative_change_median', 'cosine', 'pearson', 'channel_ratio_mean', 'channel_ratio_sd', 'fraction_up', 'fraction_down', 'effect_size', 'floor', 'above_floor', 'signature_slope', 'signature_intercept', 'feature_matching_fraction', 'nonfinite_base', 'nonfinite_mod', 'unit'];
  const lines = [header.join(',')];
  for (const l of report.layers) {
    lines.push([l.depth, l.name, l.op, l.site, l.belowSite, l.relativeChange, l.relativeChangeCi?.[0], l.relativeChangeCi?.[1], l.relativeChangeMedian, l.cosine, l.pearson, l.channelRatioMean, l.channelRatioSd, l.fractionUp, l.fractionDown, l.effectSize, l.floor, l.aboveFloor, l.signature?.slope, l.signature?.intercept, l.signature?.featureMatchingFraction, l.nonFinite.base, l.nonFinite.mod, l.unit ?? 'channels'].map(csvField).join(','));
  }
  return `${lines.join('\n')}\n`;
}

/** JSON text of a report (typed arrays become plain arrays; NaN/Infinity become null). */
export function reportToJson(value: unknown): string {
  return `${JSON.stringify(value, (_key, v: unknown) => (ArrayBuffer.isView(v) && !(v instanceof DataView) ? Array.from(v as Float64Array) : v), 2)}\n`;
}

/** " (−8.0 to +5.0)" when the ROC curves are vertical at the baseline's false-alarm rate, else "" (older reports: ""). */
export function matchedRangeText(range: readonly [number, number] | undefined): string {
  if (!range || !(range[1] - range[0] > 0.05)) return '';
  return ` (range ${signed(range[0], 1)} to ${signed(range[1], 1)})`;
}

/**
 * What every column of the per-layer diff table means, in one paragraph under it (wrapped to the width by
 * the caller's fitting): depth, rel. change, profile, ratio (and "signed"), up/down, effect, the signature
 * columns when shown, and floor. Ratios are of channels, of features at token layers, or of "units" when
 * the table mixes them (then one clause says which is which; see unit-words.ts).
 */
export function diffTableFooter(report: DiffReport, withSignature: boolean): string {
  const labels = shortLayerLabels(report.layers.map((l) => l.name));
  const { one, many, note } = unitWords(report.layers.map((l) => l.unit), report.layers.map((l) => labels.get(l.name)!));
  const parts = [
    '◆ modulation site',
    'depth: position among the model\'s recordable tensors',
    'rel. change: ‖mod − base‖ / ‖base‖ [95% bootstrap interval]',
    'profile: rel. change on a log scale',
    `ratio: modulated ÷ baseline ${one} means (mean ± sd over ${many}); "signed": some baseline ${one} mean is negative, so no ratio is shown and up/down count ${one} mean shifts beyond ±tolerance × the RMS ${one} mean`,
    `up/down: ${many} changed beyond ±tolerance`,
    `effect: mean over ${many} of |Δ ${one} mean| ÷ its baseline sd across stimuli`,
  ];
  if (note) parts.push(note);
  if (withSignature) parts.push(`slope, intercept: least-squares line of ${one} ratio against tuning rank (0 = most preferred; the feature-similarity-gain signature is a negative slope and an intercept above 1)`, `match: fraction of ${many} that do not prefer the target and are enhanced anyway (feature matching)`);
  parts.push(`floor: rel. change above or below the floor (${report.floor.description}); "same file": the baseline's own file (upstream of the site)`);
  return parts.join('; ');
}
