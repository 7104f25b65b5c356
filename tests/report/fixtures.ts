/**
 * Report inputs built in the tests from the result types (`DiffReport`, `SchemeComparison`,
 * `SweepResult`, `TableComparison`, tune JSON). The numbers are made to look like a real run (an effect
 * that decays exponentially below its site, detection tables from counts through `detectionStats`), but
 * nothing asserts them: tests check what the report does with them (aggregation, escaping, markup).
 */
import { linearFit } from '../../src/stats/correlation.js';
import { detectionStats, type DetectionStats } from '../../src/stats/signal-detection.js';
import type { TableComparison } from '../../src/compare/compare-tables.js';
import { compareSchemes, verdictOf } from '../../src/compare/diff-verdict.js';
import { dtypeFloor } from '../../src/compare/diff-snapshots.js';
import { type DiffReport, type LayerDiffRow, type SchemeComparison, type TaskCategory } from '../../src/compare/diff-types.js';
import type { SweepCell, SweepDepthPoint, SweepResult } from '../../src/replay/sweep-types.js';
import { createRandom } from '../../src/random.js';

/** The hostile strings used to test escaping: markup, ampersand, both quotes. */
export const HOSTILE = {
  layer: '<script>alert("layer")</script>',
  category: `ring & "cross" <b>'bold'</b>`,
  site: `conv<img src=x onerror=alert(1)>`,
  file: `a&b"c'<script>.json`,
};

/** Layer names of the fixture network (12 recorded layers). */
export function layerNames(hostile = false): string[] {
  const names = ['input.norm', 'conv1', 'relu1', 'pool1', 'conv2', 'relu2', 'pool2', 'conv3', 'relu3', 'pool3', 'fc1', 'logits'];
  if (hostile) {
    names[2] = HOSTILE.site;
    names[7] = HOSTILE.layer;
  }
  return names;
}

function stats(hits: number, falseAlarms: number, signal = 40, noise = 80): DetectionStats {
  return detectionStats({ hits, signalTrials: signal, falseAlarms, noiseTrials: noise });
}

function change(a: DetectionStats, b: DetectionStats): TaskCategory['change'] {
  return { hitRatePp: 100 * (b.hitRate - a.hitRate), falseAlarmRatePp: 100 * (b.falseAlarmRate - a.falseAlarmRate), accuracyPp: 100 * (b.accuracy - a.accuracy), dPrime: b.dPrime - a.dPrime, criterion: b.criterion - a.criterion };
}

/** Options of `makeDiff`. */
export interface DiffFixtureOptions {
  /** Ordinal of the site among the 12 layers (default 2). */
  site?: number;
  /** Relative change at the site (default 0.12). */
  start?: number;
  /** ln-rate per layer below the site (default −0.35). */
  rate?: number;
  hostile?: boolean;
  kind?: string;
  strength?: number;
  folder?: string;
  categories?: string[];
  /** Extra hits of the modulated run per category (default 4). */
  gainHits?: number;
}

/** A diff report shaped like `diffSnapshots` output. */
export function makeDiff(options: DiffFixtureOptions = {}): DiffReport {
  const names = layerNames(options.hostile);
  const siteOrdinal = options.site ?? 2;
  const start = options.start ?? 0.12;
  const rate = options.rate ?? -0.35;
  const floor = dtypeFloor('float32');
  const layers: LayerDiffRow[] = names.map((name, ordinal) => {
    const below = ordinal - siteOrdinal;
    const rc = below < 0 ? 0 : start * Math.exp(rate * below);
    return {
      name,
      op: name.startsWith('relu') ? 'Relu' : name.startsWith('pool') ? 'MaxPool' : name === 'logits' || name === 'fc1' ? 'Gemm' : 'Conv',
      depth: 2 * ordinal,
      ordinal,
      weightDepth: ordinal,
      site: below === 0,
      downstream: below > 0,
      belowSite: below,
      relativeChange: rc,
      relativeChangeMedian: rc * 0.97,
      cosine: 1 - (rc * rc) / 2,
      pearson: 1 - (rc * rc) / 2,
      channelRatioMean: 1 + rc / 2,
      channelRatioSd: rc,
      fractionUp: below < 0 ? 0 : 0.55,
      fractionDown: below < 0 ? 0 : 0.3,
      effectSize: rc * 4,
      nonFinite: { base: 0, mod: 0 },
      floor,
      aboveFloor: rc > floor,
      relativeChangeCi: below < 0 ? [0, 0] : [rc * 0.9, rc * 1.1],
      signature: below < 0 ? null : { slope: -0.4 * Math.exp(rate * below), intercept: 1 + 0.2 * Math.exp(rate * below), r: -0.8, n: 16, ci: null, featureMatchingFraction: 0.1, featureSimilarityScore: 0.7 },
      unchanged: below < 0,
    };
  });
  const categories = options.categories ?? (options.hostile ? [HOSTILE.category, 'bar'] : ['ring', 'cross', 'bar']);
  const gain = options.gainHits ?? 4;
  const perCategory: TaskCategory[] = categories.map((category, i) => {
    const base = stats(26 + i, 14 - i);
    const mod = stats(26 + i + gain, 13 - i);
    const aucBase = 0.78 + 0.01 * i;
    const aucChange = 0.01 * gain;
    return {
      category, unit: i, threshold: 0, signalTrials: 40, noiseTrials: 80, base, mod, change: change(base, mod),
      ci: { dPrime: [change(base, mod).dPrime - 0.2, change(base, mod).dPrime + 0.2], accuracyPp: [-1, 5], auc: [aucChange - 0.02, aucChange + 0.02] },
      auc: { base: aucBase, mod: aucBase + aucChange, change: aucChange, ci: [aucChange - 0.02, aucChange + 0.02] },
      matchedHitRatePp: 2.5 * gain,
      criterionControl: { shift: -0.1, hitRatePp: -1.25, dPrime: 0.01 },
    };
  });
  const base = perCategory[0]!.base;
  const mod = perCategory[0]!.mod;
  const below = layers.filter((l) => l.belowSite > 0);
  const report: DiffReport = {
    base: { folder: 'snapshots/base', modulation: null },
    mod: { folder: options.folder ?? 'snapshots/mod-tuning', modulation: { spec: 'mod.json', modulations: [{ kind: options.kind ?? 'tuning', site: names[siteOrdinal]!, details: { strength: options.strength ?? 0.5, target: categories[0]! } }] } },
    sites: [names[siteOrdinal]!],
    stimuli: 120,
    layers,
    floor: { source: 'dtype', description: 'four units of float roundoff of the stored dtype' },
    survival: { layer: below[below.length - 1]!.name, belowSite: below[below.length - 1]!.belowSite },
    depthUnit: 'weight layers',
    depthProfile: { rate, intercept: Math.log(start), halfDepth: rate < 0 ? Math.LN2 / -rate : null, doublingDepth: rate > 0 ? Math.LN2 / rate : null, r2: 1, used: below.length, excluded: 0 },
    task: {
      kind: 'detect', readout: 'logits', thresholdRule: 'fixed threshold 0', categories: perCategory, base, mod, change: change(base, mod),
      ci: { dPrime: [0.1, 0.5], accuracyPp: [0, 6], auc: [0.01, 0.07] },
      auc: perCategory[0]!.auc, matchedHitRatePp: perCategory[0]!.matchedHitRatePp, criterionControl: { hitRatePp: -1.25, dPrime: 0.01 }, measure: 'auc',
    },
    verdict: '',
  };
  report.verdict = verdictOf(report);
  return report;
}

/** A scheme comparison of two fixture diffs (tuning vs sensitivity at the same site). */
export function makeComparison(hostile = false): SchemeComparison {
  return compareSchemes(makeDiff({ hostile, folder: 'snapshots/mod-tuning' }), makeDiff({ hostile, kind: 'sensitivity', rate: -0.2, start: 0.09, folder: 'snapshots/mod-sensitivity', gainHits: 6 }));
}

/** Options of `makeSweep`. */
export interface SweepFixtureOptions {
  hostile?: boolean;
  depthProfile?: boolean;
  strengths?: number[];
}

/** A sweep result shaped like `sonde sweep` output: 3 sites × 4 schemes × strengths × 3 categories (× 3 control seeds). */
export function makeSweep(options: SweepFixtureOptions = {}): SweepResult {
  const names = layerNames(options.hostile);
  const siteOrdinals = [2, 5, 8];
  const sites = siteOrdinals.map((o) => names[o]!);
  const schemes = ['tuning', 'sensitivity', 'uniform', 'shuffled'];
  const strengths = options.strengths ?? [0, 0.25, 0.5, 0.75, 1];
  const categories = options.hostile ? [HOSTILE.category, 'bar', 'cross'] : ['ring', 'cross', 'bar'];
  const controlSeeds = [1, 2, 3];
  const random = createRandom(7);
  const cells: SweepCell[] = [];
  sites.forEach((site, si) => {
    for (const scheme of schemes) {
      for (const strength of strengths) {
        for (const category of categories) {
          for (const seed of scheme === 'shuffled' ? controlSeeds : [0]) {
            const slope = scheme === 'tuning' ? 0.5 + 0.3 * si : scheme === 'sensitivity' ? 0.7 + 0.4 * si : scheme === 'uniform' ? 0.05 : 0;
            const dPrime = strength * slope + (scheme === 'shuffled' ? 0.08 * strength * (random.uniform() - 0.5) : 0);
            const base = { hitRate: 0.7, falseAlarmRate: 0.2, dPrime: 1.37, criterion: -0.16, accuracy: 0.77, auc: 0.83 };
            const auc = 0.04 * dPrime;
            const mod = { ...base, dPrime: base.dPrime + dPrime, accuracy: base.accuracy + 0.05 * dPrime, auc: base.auc + auc };
            const act = 0.12 * strength;
            const depthProfile: SweepDepthPoint[] | undefined = options.depthProfile === false ? undefined : names.slice(siteOrdinals[si]!).map((layer, k) => ({
              layer,
              depth: 2 * (siteOrdinals[si]! + k),
              belowSite: k,
              relativeChange: act * Math.exp((scheme === 'sensitivity' ? -0.2 : -0.4) * k),
              signatureSlope: k === 0 ? -0.4 * strength : -0.4 * strength * Math.exp(-0.5 * k),
            }));
            cells.push({
              site, scheme, strength, category, seed, base, mod,
              change: { dPrime, criterion: 0, hitRatePp: 100 * 0.1 * dPrime, falseAlarmRatePp: 0, accuracyPp: 100 * 0.05 * dPrime, auc, matchedHitRatePp: 100 * 0.1 * dPrime },
              criterionControl: { shift: 0, hitRatePp: 0, dPrime: 0 },
              siteActivityChange: act,
              ...(depthProfile ? { depthProfile } : {}),
            });
          }
        }
      }
    }
  });
  const top = strengths[strengths.length - 1]!;
  return {
    kind: 'sweep',
    model: { file: options.hostile ? HOSTILE.file : 'models/glyph-net.onnx', sha256: 'ab'.repeat(32) },
    baseline: 'snapshots/base',
    sites, schemes, strengths, categories, controlSeeds, cells,
    measure: 'auc',
    best: sites.map((site, si) => ({ site, scheme: 'sensitivity', strength: top, dPrimeChange: top * (0.7 + 0.4 * si), aucChange: 0.04 * top * (0.7 + 0.4 * si), accuracyPp: 5 * top * (0.7 + 0.4 * si), siteActivityChange: 0.12 * top })),
    calibration: sites.flatMap((site) => ['tuning', 'sensitivity'].map((scheme) => ({ site, scheme, target: 'dprime:+0.5', strength: scheme === 'tuning' ? 0.62 : 0.45, siteActivityChange: scheme === 'tuning' ? 0.074 : 0.054, withinBand: true }))),
    band: { low: 0.05, high: 0.3, source: 'attention-related firing-rate changes, from memory (../shared/DOMAIN.md)' },
    control: { meanTuning: 0.024, meanShuffled: 0.0004, difference: 0.0236, pValue: 0.004, test: 'paired t-test across categories', measure: 'auc' },
    summary: `attention helps most at ${sites[2]} (sensitivity, strength ${top})`,
  };
}

/** A tuning–sensitivity agreement of 8 layers, pooled r rising with depth. */
export function makeAgreement(hostile = false): TableComparison {
  const names = layerNames(hostile).slice(1, 9);
  const categories = hostile ? [HOSTILE.category, 'bar'] : ['ring', 'cross', 'bar'];
  const layers = names.map((layer, i) => {
    const r = -0.1 + 0.09 * i;
    return { layer, depth: 2 * (i + 1), channels: 16 * (1 + (i >> 2)), byCategory: categories.map((category, k) => ({ category, n: 16, pearson: r + 0.05 * (k - 1), spearman: r })), pooled: { n: 16 * categories.length, pearson: r, spearman: r - 0.03 } };
  });
  const depthTrend = linearFit(layers.map((l) => l.depth), layers.map((l) => l.pooled.pearson));
  return { layers, categories, sensitivityScale: 'normalised', unmatched: [], depthTrend };
}

/** What `tune --json` prints, optionally with `--against` (a `comparison` field). */
export function makeTuneJson(hostile = false, withComparison = false): Record<string, unknown> {
  const names = layerNames(hostile).slice(1, 11);
  const layers = names.map((layer, i) => ({ layer, op: 'Relu', depth: 2 * (i + 1), channels: 16, selectiveFraction: Math.min(1, 0.05 + 0.08 * i), meanSelectivity: 0.1 + 0.05 * i, zeroVarianceChannels: i === 0 ? 1 : 0, nonFiniteChannels: 0, negativeChannels: 0 }));
  return { snapshot: 'snapshots/base', out: 'tuning.arrow', categories: ['ring', 'cross', 'bar'], counts: { ring: 40, cross: 40, bar: 40 }, stimuliUsed: 120, stimuliSkipped: 0, selectiveIndex: 1 / 3, layers, ...(withComparison ? { comparison: makeAgreement(hostile) } : {}) };
}

/** JSON round trip as the CLI writes it (NaN/Infinity become null, typed arrays stay arrays). */
export function viaJson<T>(value: T): unknown {
  return JSON.parse(JSON.stringify(value));
}
