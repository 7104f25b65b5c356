/**
 * `diffSnapshots`: two snapshots of one model and one stimulus set, compared layer by layer. The work is
 * in three steps, one file each: collect (diff-collect.ts: stream both snapshots once through per-layer
 * accumulators and gather the read-out scores), finish (here: metrics, noise floor, intervals, signature,
 * survival and depth profile, with the task read-out of diff-task.ts), and word (diff-verdict.ts).
 */
import { bootstrapIntervals } from '../stats/bootstrap.js';
import { fitDepthProfile } from '../analysis/depth-profile.js';
import { fitSignature } from '../analysis/signature.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { assertPaired, collectDiff, type DiffCollection } from './diff-collect.js';
import type { DiffOptions, DiffReport, LayerDiffRow, SchemeComparison } from './diff-types.js';
import { taskReadout } from './diff-task.js';
import { compareSchemes, verdictOf } from './diff-verdict.js';


/** Numerical floor of relative change for a storage type: four units of roundoff (common practice). */
export function dtypeFloor(dtype: string): number {
  return dtype === 'float16' ? 4 * 2 ** -11 : 4 * 2 ** -24;
}

/** Where the (first) modulation site sits: see `placeSite`. */
export interface SitePlace {
  name: string;
  /** Position among the model's recordable tensors (the manifest's `depth` scale). */
  depth: number;
  /** Weight layers from the input to the site (-1 when unknown). */
  weightDepth: number;
  /** Unit of `belowSite`: weight layers when the manifests give them, else recorded layers (snapshots of older builds). */
  unit: 'weight layers' | 'recorded layers';
  /** Ordinal of the last recorded layer at or above the site (the origin of `recorded layers`). */
  anchor: number;
}

/**
 * Places the first modulation site in the graph, whether or not it was recorded: from the graph
 * position the modulated manifest records for each site (`modulation.sites[]`, written by
 * `recordModulated`), else from the recorded layer of that name. Layers after it in graph order are
 * "downstream"; depth below it is counted in weight layers (`weightLayerDepths`, src/graph/structure.ts),
 * a unit that does not change with the recorded selection.
 * @returns the place, or null when no site can be placed (no modulation, or an older manifest whose site was not recorded).
 */
export function placeSite(collection: Pick<DiffCollection, 'sites' | 'layers' | 'mod'>): SitePlace | null {
  const recordedPlaces = (collection.mod.modulation as { sites?: unknown } | null)?.sites;
  const candidates: Array<{ name: string; depth: number; weightDepth: number }> = [];
  for (const name of collection.sites) {
    const listed = Array.isArray(recordedPlaces) ? (recordedPlaces as Array<Record<string, unknown>>).find((p) => p && p['name'] === name) : undefined;
    if (listed && typeof listed['depth'] === 'number' && listed['depth'] >= 0) {
      candidates.push({ name, depth: listed['depth'], weightDepth: typeof listed['weightDepth'] === 'number' ? listed['weightDepth'] : -1 });
      continue;
    }
    const layer = collection.layers.find((l) => l.name === name);
    if (layer) candidates.push({ name, depth: layer.depth, weightDepth: layer.weightDepth ?? -1 });
  }
  if (candidates.length === 0) return null;
  const first = candidates.reduce((a, b) => (b.depth < a.depth ? b : a));
  let anchor = -1;
  collection.layers.forEach((l, i) => {
    if (l.depth <= first.depth) anchor = i;
  });
  const weights = first.weightDepth >= 0 && collection.layers.every((l) => l.weightDepth !== null);
  return { ...first, unit: weights ? 'weight layers' : 'recorded layers', anchor };
}

/**
 * Diffs a modulated snapshot against its baseline, layer by layer, streaming both batch by batch
 * (memory: one batch per side plus per-stimulus summaries). See `DiffReport` for what is measured.
 * @throws UsageError when the snapshots do not pair or an option is malformed.
 */
export async function diffSnapshots(options: DiffOptions & { vs?: undefined }): Promise<DiffReport>;
export async function diffSnapshots(options: DiffOptions & { vs: string | Snapshot }): Promise<SchemeComparison>;
export async function diffSnapshots(options: DiffOptions): Promise<DiffReport | SchemeComparison>;
export async function diffSnapshots(options: DiffOptions): Promise<DiffReport | SchemeComparison> {
  const base = typeof options.base === 'string' ? openSnapshot(options.base) : options.base;
  const mod = typeof options.mod === 'string' ? openSnapshot(options.mod) : options.mod;
  if (options.vs !== undefined) {
    const other = typeof options.vs === 'string' ? openSnapshot(options.vs) : options.vs;
    assertPaired(base, other);
    const a = await diffOne(base, mod, options);
    const b = await diffOne(base, other, options);
    return compareSchemes(a, b);
  }
  return diffOne(base, mod, options);
}

async function diffOne(base: Snapshot, mod: Snapshot, options: DiffOptions): Promise<DiffReport> {
  return finishDiff(await collectDiff(base, mod, options), options);
}

/**
 * Turns a collection into the diff report: per-layer metrics, noise floor, bootstrap intervals,
 * signatures, survival, depth profile, detection read-out and verdict.
 * @param collection from `collectDiff` (or merged partial collections).
 * @param options bootstrap, seed, tolerance and threshold as given to `collectDiff`.
 * @returns the report.
 * @throws UsageError when a layer holds no stimuli.
 */
export async function finishDiff(collection: DiffCollection, options: Pick<DiffOptions, 'bootstrap' | 'seed' | 'tolerance' | 'threshold' | 'measure'>): Promise<DiffReport> {
  const resamples = options.bootstrap ?? 1000;
  const seed = options.seed ?? 0;
  const tolerance = options.tolerance ?? 0.01;
  const sites = collection.sites;
  const place = placeSite(collection);
  const rows: LayerDiffRow[] = [];
  for (let ordinal = 0; ordinal < collection.layers.length; ordinal++) {
    const layer = collection.layers[ordinal]!;
    const metrics = layer.accumulator.finish();
    const norms = layer.accumulator.perStimulusNorms();
    let floor = dtypeFloor(layer.modDtype === 'float16' || layer.baseDtype === 'float16' ? 'float16' : 'float32');
    if (layer.floor) floor = Math.max(floor, layer.floor.finish().relativeChange);
    let ci: [number, number] | null = null;
    if (resamples > 0 && metrics.stimuli > 1) {
      const [interval] = bootstrapIntervals(metrics.stimuli, (idx, out) => {
        let dd = 0;
        let aa = 0;
        for (let i = 0; i < idx.length; i++) {
          dd += norms.diffSquared[idx[i]!]!;
          aa += norms.baseSquared[idx[i]!]!;
        }
        out[0] = aa > 0 ? Math.sqrt(dd / aa) : dd > 0 ? Infinity : 0;
      }, 1, { resamples, seed: `${seed}:${layer.name}` });
      ci = [interval!.low, interval!.high];
    }
    let signature: LayerDiffRow['signature'] = null;
    // a signed layer (negative channel means) has no meaningful channel ratios, so no signature either
    if (layer.tuning && !metrics.signed) {
      const means = layer.accumulator.channelMeans();
      const fit = fitSignature({ baseChannelMeans: means.base, modChannelMeans: means.mod, stimuli: means.stimuli, channels: means.channels, tuning: layer.tuning, tolerance, ...(resamples > 0 ? { bootstrap: { resamples, seed: `${seed}:sig:${layer.name}` } } : {}) });
      const { normalisedRank: _r, ratio: _q, ...rest } = fit;
      signature = rest;
    }
    rows.push({
      name: layer.name,
      op: layer.op,
      depth: layer.depth,
      ordinal,
      weightDepth: layer.weightDepth,
      site: sites.includes(layer.name),
      downstream: place !== null && layer.depth > place.depth,
      belowSite: place === null ? Number.NaN : place.unit === 'weight layers' ? layer.weightDepth! - place.weightDepth : ordinal - place.anchor,
      relativeChange: metrics.relativeChange,
      relativeChangeMedian: metrics.relativeChangeMedian,
      cosine: metrics.cosine,
      pearson: metrics.pearson,
      signedLayer: metrics.signed,
      channelRatioMean: metrics.channelRatioMean,
      channelRatioSd: metrics.channelRatioSd,
      fractionUp: metrics.fractionUp,
      fractionDown: metrics.fractionDown,
      effectSize: metrics.effectSize,
      nonFinite: metrics.nonFinite,
      floor,
      // non-finite data have no meaningful place relative to the floor
      aboveFloor: metrics.nonFinite.base + metrics.nonFinite.mod === 0 && metrics.relativeChange > floor,
      relativeChangeCi: ci,
      signature,
      unchanged: layer.unchanged,
      ...(layer.unit ? { unit: layer.unit } : {}),
    });
  }
  const below = rows.filter((r) => r.downstream);
  const surviving = below.filter((r) => r.aboveFloor);
  const deepest = surviving.length > 0 ? surviving[surviving.length - 1]! : null;
  const depthProfile = fitDepthProfile(below.map((r) => ({ depth: r.belowSite, value: r.relativeChange })), { floor: Math.max(...below.map((r) => r.floor), 0) });
  const task = collection.task ? taskReadout(collection.task, options.threshold ?? 'auto', resamples, seed, options.measure ?? 'auc') : null;
  const report: DiffReport = {
    base: { folder: collection.base.folder, modulation: null },
    mod: { folder: collection.mod.folder, modulation: collection.mod.modulation },
    sites,
    stimuli: collection.stimuli,
    layers: rows,
    floor: collection.floor ? { source: 'snapshot', description: `relative change of ${collection.floor.folder} against the baseline (at least the dtype floor)` } : { source: 'dtype', description: 'four units of float roundoff of the stored dtype' },
    survival: { layer: deepest?.name ?? null, belowSite: deepest?.belowSite ?? null },
    depthUnit: place?.unit ?? 'weight layers',
    depthProfile,
    task,
    verdict: '',
  };
  report.verdict = verdictOf(report);
  return report;
}
