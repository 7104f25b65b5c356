import Table from 'cli-table3';
import { sparkline } from '../analysis/sparkline.js';
import type { DiffReport, SchemeComparison } from '../compare/diff-types.js';
import { bar, compact, csvField, fixed, signed } from '../format.js';

const STYLE = { head: [], border: [], compact: true };

/** Bar length for a relative change on a log scale between the floor and the largest change. */
function logBar(value: number, low: number, high: number): string {
  if (!(value > 0) || !(high > low)) return '';
  return bar((Math.log10(Math.max(value, low)) - Math.log10(low)) / (Math.log10(high) - Math.log10(low)));
}

/** The per-layer terminal table of a diff, a depth-profile sparkline, the task table and the verdict. */
export function renderDiffReport(report: DiffReport): string {
  const withSignature = report.layers.some((l) => l.signature);
  const head = ['depth', 'layer', 'op', 'rel. change', 'profile', 'cosine', 'ratio', 'up/down', 'effect'];
  if (withSignature) head.push('slope', 'intercept', 'match');
  head.push('floor');
  const table = new Table({ head, style: STYLE });
  const changes = report.layers.map((l) => l.relativeChange).filter((v) => v > 0 && Number.isFinite(v));
  const high = Math.max(...changes, 1e-30);
  const low = Math.max(Math.min(...changes, high), high * 1e-6, ...report.layers.map((l) => l.floor)) / 10;
  for (const layer of report.layers) {
    const ci = layer.relativeChangeCi ? ` [${compact(layer.relativeChangeCi[0])}, ${compact(layer.relativeChangeCi[1])}]` : '';
    const row = [
      `${layer.depth}${layer.site ? ' ◆' : ''}`,
      layer.name,
      layer.op,
      `${compact(layer.relativeChange)}${ci}`,
      logBar(layer.relativeChange, low, high),
      fixed(layer.cosine, 4),
      `${fixed(layer.channelRatioMean)} ±${fixed(layer.channelRatioSd, 2)}`,
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
  const lines = [table.toString()];
  const below = report.layers.filter((l) => l.site || l.downstream);
  const unit = report.depthUnit ?? 'recorded layers';
  lines.push(`depth profile from the site (log relative change): ${sparkline(below.map((l) => (l.relativeChange > 0 ? Math.log10(l.relativeChange) : Number.NaN)))}  rate ${fixed(report.depthProfile.rate)} per ${unit.replace(/s$/, '')} below the site, r² ${fixed(report.depthProfile.r2, 2)}`);
  lines.push(`◆ modulation site; ratio = modulated ÷ baseline channel means (mean ± sd over channels); up/down: channels beyond ±tolerance; floor: ${report.floor.description}`);
  if (report.task) {
    const task = new Table({ head: ['category', 'threshold', 'AUC', 'ΔAUC [95% CI]', 'ΔH at base F', 'hit rate', 'false alarms', "d′", 'criterion', 'accuracy', "Δd′ [95% CI]", 'Δaccuracy', 'criterion shift only: ΔH, Δd′'], style: STYLE });
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
    lines.push('', `task: detection from "${report.task.readout}" (${report.task.thresholdRule}); rates base → modulated`, task.toString());
    lines.push("AUC: ROC area of the readout (threshold-free); ΔH at base F: hit-rate change at the baseline's false-alarm rate; criterion shift only: the baseline shifted by a constant to the modulated false-alarm rate");
  }
  lines.push('', `verdict: ${report.verdict}`);
  return `${lines.join('\n')}\n`;
}

/** Side-by-side table of two schemes against the same baseline. */
export function renderComparison(comparison: SchemeComparison, labels: [string, string] = ['A', 'B']): string {
  const table = new Table({ head: ['depth', 'layer', `rel. change ${labels[0]}`, `rel. change ${labels[1]}`, 'larger', 'beyond spread'], style: STYLE });
  comparison.layers.forEach((l, i) => {
    const a = comparison.a.layers[i]!;
    table.push([`${l.depth}${a.site || comparison.b.layers[i]!.site ? ' ◆' : ''}`, l.name, compact(l.a), compact(l.b), l.larger === 'equal' ? '=' : l.larger === 'a' ? labels[0] : labels[1], l.separated ? 'yes' : 'no']);
  });
  const lines = [`${labels[0]}: ${comparison.a.mod.folder}`, `${labels[1]}: ${comparison.b.mod.folder}`, table.toString()];
  if (comparison.task) {
    const digits = comparison.task.measure === 'auc' ? 3 : 2;
    lines.push(`detection ${comparison.task.measure === 'auc' ? 'ΔAUC (threshold-free)' : 'Δd′ (fixed threshold)'}: ${labels[0]} ${signed(comparison.task.a, digits)}, ${labels[1]} ${signed(comparison.task.b, digits)}`);
  }
  lines.push(`verdict ${labels[0]}: ${comparison.a.verdict}`, `verdict ${labels[1]}: ${comparison.b.verdict}`, `comparison: ${comparison.verdict.replace(/\bA\b/g, labels[0]).replace(/\bB\b/g, labels[1])}`);
  return `${lines.join('\n')}\n`;
}

/** One CSV row per layer, for spreadsheets. */
export function diffToCsv(report: DiffReport): string {
  const header = ['depth', 'layer', 'op', 'site', 'below_site', 'relative_change', 'relative_change_low', 'relative_change_high', 'relative_change_median', 'cosine', 'pearson', 'channel_ratio_mean', 'channel_ratio_sd', 'fraction_up', 'fraction_down', 'effect_size', 'floor', 'above_floor', 'signature_slope', 'signature_intercept', 'feature_matching_fraction', 'nonfinite_base', 'nonfinite_mod'];
  const lines = [header.join(',')];
  for (const l of report.layers) {
    lines.push([l.depth, l.name, l.op, l.site, l.belowSite, l.relativeChange, l.relativeChangeCi?.[0], l.relativeChangeCi?.[1], l.relativeChangeMedian, l.cosine, l.pearson, l.channelRatioMean, l.channelRatioSd, l.fractionUp, l.fractionDown, l.effectSize, l.floor, l.aboveFloor, l.signature?.slope, l.signature?.intercept, l.signature?.featureMatchingFraction, l.nonFinite.base, l.nonFinite.mod].map(csvField).join(','));
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
