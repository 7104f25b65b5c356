/**
 * The detection read-out of a diff: hit and false-alarm rates, d′ and criterion at a threshold fixed on
 * the baseline, ROC area, hit rate at the baseline's false-alarm rate, the criterion-shift-only control,
 * and paired bootstrap intervals over stimuli, per category and averaged.
 */
import { UsageError, nameList } from '../errors.js';
import { bootstrapIntervals, type BootstrapInterval } from '../stats/bootstrap.js';
import { readoutChanges } from '../analysis/readout-change.js';
import { rocAuc, rocAucWeighted, rocOrder } from '../stats/roc.js';
import { accuracyMaximisingThreshold, detectFromScores, type DetectionStats } from '../stats/signal-detection.js';
import type { TaskCategory, TaskReport } from './diff-types.js';
import type { ReadoutMapTag } from '../graph/category-map.js';

/** The read-out scores gathered by `collectDiff` for the detection task. */
export interface CollectedTask {
  /** Readout layer and the category of each unit. */
  readout: string;
  kinds: string[];
  modelThreshold: number | undefined;
  /** The task's categories (validated). */
  categories: string[];
  /** Units of the readout layer. */
  units: number;
  /** [N, units] channel means of the readout layer, both sides, and each stimulus's labels. */
  baseScores: Float32Array;
  modScores: Float32Array;
  labels: string[][];
  /** The readout map the scores were grouped by (their units are then its categories), absent for the sidecar's units. */
  map?: ReadoutMapTag;
}

/**
 * The detection read-out of collected scores: per category and averaged, base vs modulated at one fixed
 * threshold, with ROC areas, the matched hit rate, the criterion-shift control and bootstrap intervals.
 * @param collected the scores, labels and readout units gathered by `collectDiff`.
 * @param rule the threshold rule: a number, `best` (accuracy-maximising on the baseline) or `auto`.
 * @param measure which measure leads the report.
 */
export function taskReadout(collected: CollectedTask, rule: number | 'best' | 'auto', resamples: number, seed: number, measure: 'auc' | 'dprime'): TaskReport {
  const { categories, units, baseScores, modScores, labels } = collected;
  const readout = { layer: collected.readout, kinds: collected.kinds, threshold: collected.modelThreshold };
  const n = labels.length;
  const perCategory: TaskCategory[] = [];
  const columns: Array<{ a: Float64Array; b: Float64Array; signal: Uint8Array; threshold: number; degenerate: boolean }> = [];
  for (const category of categories) {
    const unit = readout.kinds.indexOf(category);
    const a = new Float64Array(n);
    const b = new Float64Array(n);
    const signal = new Uint8Array(n);
    for (let i = 0; i < n; i++) {
      a[i] = baseScores[i * units + unit]!;
      b[i] = modScores[i * units + unit]!;
      signal[i] = labels[i]!.includes(category) ? 1 : 0;
    }
    const threshold = chooseThreshold(rule, readout.threshold, a, signal);
    const sb = detectFromScores(a, signal, threshold);
    const sm = detectFromScores(b, signal, threshold);
    const degenerate = degenerateThreshold(sb, threshold);
    if (degenerate) {
      // d′ and c of a rule that answers the same for every display are set by the log-linear
      // correction and the class sizes alone: not shown (NaN), and said why
      for (const s of [sb, sm]) {
        s.dPrime = Number.NaN;
        s.criterion = Number.NaN;
      }
    }
    columns.push({ a, b, signal, threshold, degenerate: degenerate !== null });
    const ci = resamples > 0 ? bootstrapChange([columns[columns.length - 1]!], resamples, `${seed}:task:${category}`) : null;
    const aucBase = rocAuc(a, signal);
    const aucMod = rocAuc(b, signal);
    const readouts = readoutChanges({ scores: a, signal, threshold, detection: sb }, b, sm.falseAlarmRate);
    perCategory.push({
      category,
      unit,
      threshold,
      signalTrials: sb.counts.signalTrials,
      noiseTrials: sb.counts.noiseTrials,
      base: pick(sb),
      mod: pick(sm),
      change: changeOf(sb, sm),
      ci,
      auc: { base: aucBase, mod: aucMod, change: aucMod - aucBase, ci: ci ? ci.auc : null },
      degenerate,
      matchedHitRatePp: readouts.matchedHitRatePp,
      matchedHitRateRangePp: readouts.matchedHitRateRangePp,
      criterionControl: readouts.criterionControl,
    });
  }
  // d′ and c average over the categories whose threshold is not degenerate (NaN when none is)
  const average = (f: (s: DetectionStats) => number, side: 'base' | 'mod') => {
    const values = perCategory.map((c) => f(c[side])).filter((v) => !Number.isNaN(v));
    return values.length === 0 ? Number.NaN : values.reduce((sum, v) => sum + v, 0) / values.length;
  };
  const meanStats = (side: 'base' | 'mod'): DetectionStats => ({
    hitRate: average((s) => s.hitRate, side),
    falseAlarmRate: average((s) => s.falseAlarmRate, side),
    dPrime: average((s) => s.dPrime, side),
    criterion: average((s) => s.criterion, side),
    accuracy: average((s) => s.accuracy, side),
    adjustedHitRate: average((s) => s.adjustedHitRate, side),
    adjustedFalseAlarmRate: average((s) => s.adjustedFalseAlarmRate, side),
    corrected: perCategory.some((c) => c[side].corrected),
  });
  const baseMean = meanStats('base');
  const modMean = meanStats('mod');
  const meanOf = (f: (c: TaskCategory) => number) => perCategory.reduce((sum, c) => sum + f(c), 0) / perCategory.length;
  // with one category the mean is that category, and so is its interval (same resamples)
  const ci = resamples > 0 ? (perCategory.length === 1 ? perCategory[0]!.ci : bootstrapChange(columns, resamples, `${seed}:task`)) : null;
  return {
    kind: 'detect',
    readout: readout.layer,
    ...(collected.map ? { readoutMap: collected.map } : {}),
    thresholdRule: typeof rule === 'number' ? `fixed threshold ${rule}` : rule === 'auto' && readout.threshold !== undefined ? `the model's threshold ${readout.threshold} (sidecar)` : 'accuracy-maximising threshold on the baseline, held fixed for the modulated run',
    categories: perCategory,
    base: baseMean,
    mod: modMean,
    change: changeOf(baseMean, modMean),
    ci,
    auc: { base: meanOf((c) => c.auc.base), mod: meanOf((c) => c.auc.mod), change: meanOf((c) => c.auc.change), ci: ci ? ci.auc : null },
    matchedHitRatePp: meanOf((c) => c.matchedHitRatePp),
    matchedHitRateRangePp: [meanOf((c) => c.matchedHitRateRangePp[0]), meanOf((c) => c.matchedHitRateRangePp[1])],
    criterionControl: { hitRatePp: meanOf((c) => c.criterionControl.hitRatePp), dPrime: meanOf((c) => c.criterionControl.dPrime) },
    measure,
  };
}

/**
 * Categories of a detection task: `detect:A,B`, `detect:all` or `labels` (every category that has a
 * readout unit and labelled stimuli).
 * @throws UsageError naming a category without a readout unit or without stimuli.
 */
export function parseDetectionTask(taskText: string, kinds: readonly string[], present: readonly string[]): string[] {
  let categories: string[];
  if (taskText === 'labels' || taskText === 'detect:all') categories = kinds.filter((k) => present.includes(k));
  else if (taskText.startsWith('detect:')) {
    categories = taskText.slice(7).split(',').map((c) => c.trim()).filter((c) => c.length > 0);
    for (const category of categories) {
      if (!kinds.includes(category)) throw new UsageError('E_TASK', `--task ${taskText}: "${category}" has no readout unit (units: ${nameList(kinds)})`);
      if (!present.includes(category)) throw new UsageError('E_TASK', `--task ${taskText}: no stimulus is labelled "${category}"`);
    }
  } else throw new UsageError('E_TASK', `--task must be detect:CATEGORY[,CATEGORY…], detect:all or labels, got "${taskText}"`);
  if (categories.length === 0) throw new UsageError('E_TASK', `--task ${taskText}: no category has both a readout unit and labelled stimuli`);
  return categories;
}

/**
 * Why a baseline threshold makes d′ meaningless, or null: when it answers the same for every display
 * (hit and false-alarm rates both 0 — e.g. the accuracy-maximising threshold +∞ at low prevalence on an
 * uninformative readout — or both 1), d′ and c come from the log-linear correction and the class sizes
 * alone, not from the readout.
 */
export function degenerateThreshold(base: DetectionStats, threshold: number): string | null {
  const t = threshold === Number.POSITIVE_INFINITY ? '+∞' : threshold === Number.NEGATIVE_INFINITY ? '−∞' : String(Number(threshold.toPrecision(4)));
  if (base.hitRate === 0 && base.falseAlarmRate === 0) return `the baseline says "absent" to every display at threshold ${t} (hit and false-alarm rates 0)`;
  if (base.hitRate === 1 && base.falseAlarmRate === 1) return `the baseline says "present" to every display at threshold ${t} (hit and false-alarm rates 1)`;
  return null;
}

/** The decision threshold of a category under `rule` (see DiffOptions.threshold). */
export function chooseThreshold(rule: number | 'best' | 'auto', modelThreshold: number | undefined, scores: Float64Array, signal: Uint8Array): number {
  if (typeof rule === 'number') return rule;
  if (rule === 'auto' && modelThreshold !== undefined) return modelThreshold;
  return accuracyMaximisingThreshold(scores, signal).threshold;
}

function pick(s: DetectionStats): DetectionStats {
  return { hitRate: s.hitRate, falseAlarmRate: s.falseAlarmRate, adjustedHitRate: s.adjustedHitRate, adjustedFalseAlarmRate: s.adjustedFalseAlarmRate, dPrime: s.dPrime, criterion: s.criterion, accuracy: s.accuracy, corrected: s.corrected };
}

function changeOf(a: DetectionStats, b: DetectionStats): TaskCategory['change'] {
  return {
    hitRatePp: 100 * (b.hitRate - a.hitRate),
    falseAlarmRatePp: 100 * (b.falseAlarmRate - a.falseAlarmRate),
    accuracyPp: 100 * (b.accuracy - a.accuracy),
    dPrime: b.dPrime - a.dPrime,
    criterion: b.criterion - a.criterion,
  };
}

/**
 * Paired bootstrap over stimuli of the mean change in d′, accuracy and ROC area across the given
 * categories (the ROC areas from multiplicities over one sort per column, see `rocAucWeighted`).
 */
function bootstrapChange(columns: Array<{ a: Float64Array; b: Float64Array; signal: Uint8Array; threshold: number; degenerate: boolean }>, resamples: number, seed: string): TaskCategory['ci'] {
  const n = columns[0]!.a.length;
  if (n < 2) return null;
  const a = new Float64Array(n);
  const b = new Float64Array(n);
  const s = new Uint8Array(n);
  const weights = new Float64Array(n);
  const orders = columns.map((column) => ({ a: rocOrder(column.a), b: rocOrder(column.b) }));
  const usable = columns.filter((column) => !column.degenerate).length;
  const intervals: BootstrapInterval[] = bootstrapIntervals(n, (idx, out) => {
    let dp = 0;
    let acc = 0;
    let auc = 0;
    weights.fill(0);
    for (let i = 0; i < idx.length; i++) weights[idx[i]!]! += 1;
    for (let k = 0; k < columns.length; k++) {
      const column = columns[k]!;
      for (let i = 0; i < idx.length; i++) {
        a[i] = column.a[idx[i]!]!;
        b[i] = column.b[idx[i]!]!;
        s[i] = column.signal[idx[i]!]!;
      }
      let signals = 0;
      for (let i = 0; i < n; i++) signals += s[i]!;
      if (signals === 0 || signals === n) {
        out[0] = Number.NaN;
        out[1] = Number.NaN;
        out[2] = Number.NaN;
        return;
      }
      const sa = detectFromScores(a, s, column.threshold);
      const sb = detectFromScores(b, s, column.threshold);
      if (!column.degenerate) dp += sb.dPrime - sa.dPrime;
      acc += 100 * (sb.accuracy - sa.accuracy);
      auc += rocAucWeighted(column.b, column.signal, weights, orders[k]!.b) - rocAucWeighted(column.a, column.signal, weights, orders[k]!.a);
    }
    out[0] = usable > 0 ? dp / usable : Number.NaN;
    out[1] = acc / columns.length;
    out[2] = auc / columns.length;
  }, 3, { resamples, seed });
  return { dPrime: [intervals[0]!.low, intervals[0]!.high], accuracyPp: [intervals[1]!.low, intervals[1]!.high], auc: [intervals[2]!.low, intervals[2]!.high] };
}
