/**
 * `compareTables`: how tuning (which channels *respond* to a category) relates to sensitivity (which
 * channels *drive* its readout), layer by layer. For every layer present in both tables and every
 * category present in both: Pearson's r and Spearman's ρ across channels between the tuning value t_kc
 * and the sensitivity value; pooled over all (channel, category) pairs of the layer; and a straight-line
 * fit of the pooled r against depth (does agreement grow with depth?).
 *
 * The sensitivity values are first normalised across the shared categories exactly as the modulation
 * resolver does before turning them into gains (`normaliseAcrossCategories`: z-score per channel,
 * population SD), so that both sides are on the same scale and the pooled correlation is not dominated
 * by the category with the largest raw derivatives. With a single shared category that normalisation is
 * undefined (every value would become 0) and the raw sensitivities are used; `sensitivityScale` says which.
 */
import { closestHint, nameList, UsageError } from '../errors.js';
import { linearFit, pearson, spearman, type LinearFit } from '../stats/correlation.js';
import { normaliseAcrossCategories } from '../modulation/gain-pattern.js';
import type { SensitivityTableBlock, TuningTableBlock } from '../snapshot/tables.js';

/** Correlations across channels for one category (or pooled). */
export interface AgreementStats {
  /** Pairs entering the correlation (channels, or channels × categories when pooled). */
  n: number;
  pearson: number;
  spearman: number;
}

/** One layer of the comparison. */
export interface LayerAgreement {
  layer: string;
  /** Depth from the tuning table (−1 when unknown). */
  depth: number;
  channels: number;
  /** Per shared category, in the tuning table's order. */
  byCategory: Array<{ category: string } & AgreementStats>;
  pooled: AgreementStats;
}

/** What `compareTables` returns. */
export interface TableComparison {
  /** Layers in both tables, in the tuning table's (depth) order. */
  layers: LayerAgreement[];
  /** Categories in both tables, in the tuning table's order. */
  categories: string[];
  /** `normalised`: sensitivities z-scored across the shared categories; `raw`: one shared category, values as measured. */
  sensitivityScale: 'normalised' | 'raw';
  /** Sensitivity layers the tuning table lacks. */
  unmatched: string[];
  /** Least-squares line of pooled Pearson r against depth (NaN fields with fewer than two layers). */
  depthTrend: LinearFit;
}

/**
 * Compares a tuning table with a sensitivity table.
 * @param tuning tuning blocks (e.g. `readTuningTable(path).blocks`).
 * @param sensitivity sensitivity blocks (e.g. `readSensitivityTable(path).blocks`).
 * @returns per-layer agreement, shared categories, and the trend with depth.
 * @throws UsageError when the tables share no layer (naming both lists), share no category, or a shared
 *   layer has different channel counts in the two tables.
 * Edge cases: a correlation is NaN when either side is constant across channels (e.g. a category whose
 * sensitivities are all 0, or a layer whose channels are all zero-variance); NaN table values make the
 * affected correlations NaN (never skipped).
 */
export function compareTables(tuning: readonly TuningTableBlock[], sensitivity: readonly SensitivityTableBlock[]): TableComparison {
  const tuningByLayer = new Map(tuning.map((b) => [b.layer, b]));
  const matched = sensitivity.filter((s) => tuningByLayer.has(s.layer));
  const unmatched = sensitivity.filter((s) => !tuningByLayer.has(s.layer)).map((s) => s.layer);
  if (matched.length === 0) {
    const sites = nameList(sensitivity.map((s) => JSON.stringify(s.layer)), 4);
    const near = closestHint(sensitivity[0]?.layer ?? '', [...tuningByLayer.keys()]);
    throw new UsageError('E_COMPARE_LAYERS', `the sensitivity table's sites (${sites}) are not layers of the tuning table (${tuning.length} layer${tuning.length === 1 ? '' : 's'}${near ? `; ${near}` : ''})`, {
      hint: 'tune a snapshot that recorded the sensitivity sites',
    });
  }
  const tuningCategories = tuning[0]?.categories ?? [];
  const sensitivityCategories = matched[0]!.categories;
  const categories = tuningCategories.filter((c) => sensitivityCategories.includes(c));
  if (categories.length === 0) {
    throw new UsageError('E_COMPARE_CATEGORIES', `the tables share no category (${tuningCategories.length} in the tuning table: ${nameList(tuningCategories, 4)}; ${sensitivityCategories.length} in the sensitivity table: ${nameList(sensitivityCategories, 4)})`, {
      hint: 'sense with a readout whose categories are the label names (a model sidecar with outputs.kinds)',
    });
  }
  const sensitivityScale = categories.length >= 2 ? 'normalised' : 'raw';
  const layers: LayerAgreement[] = [];
  const order = new Map(tuning.map((b, i) => [b.layer, i]));
  matched.sort((a, b) => order.get(a.layer)! - order.get(b.layer)!);
  for (const s of matched) {
    const t = tuningByLayer.get(s.layer)!;
    if (t.channels !== s.channels) {
      throw new UsageError('E_COMPARE_LAYERS', `layer "${s.layer}" has ${t.channels} channels in the tuning table but ${s.channels} in the sensitivity table (tables of different models?)`);
    }
    const C = t.channels;
    const tuningColumns = categories.map((c) => column(t.tuning, C, t.categories.length, t.categories.indexOf(c)));
    let sensitivityColumns = categories.map((c) => column(s.sensitivity, C, s.categories.length, s.categories.indexOf(c)));
    if (sensitivityScale === 'normalised' && sensitivityColumns.every(allFinite)) sensitivityColumns = normaliseAcrossCategories(sensitivityColumns);
    const byCategory = categories.map((category, i) => ({ category, ...agreement(tuningColumns[i]!, sensitivityColumns[i]!) }));
    const pooledT = new Float64Array(C * categories.length);
    const pooledS = new Float64Array(C * categories.length);
    categories.forEach((_, i) => {
      pooledT.set(tuningColumns[i]!, i * C);
      pooledS.set(sensitivityColumns[i]!, i * C);
    });
    layers.push({ layer: s.layer, depth: t.depth ?? -1, channels: C, byCategory, pooled: agreement(pooledT, pooledS) });
  }
  const withDepth = layers.filter((l) => l.depth >= 0 && Number.isFinite(l.pooled.pearson));
  const depthTrend = linearFit(withDepth.map((l) => l.depth), withDepth.map((l) => l.pooled.pearson));
  return { layers, categories, sensitivityScale, unmatched, depthTrend };
}

function agreement(x: Float64Array, y: Float64Array): AgreementStats {
  return { n: x.length, pearson: pearson(x, y), spearman: spearman(x, y) };
}

/** Column c of a [C, K] row-major array: values[k*K + c] for k = 0..C−1. */
function column(values: Float64Array, C: number, K: number, c: number): Float64Array {
  const out = new Float64Array(C);
  for (let k = 0; k < C; k++) out[k] = values[k * K + c]!;
  return out;
}

function allFinite(values: Float64Array): boolean {
  for (let i = 0; i < values.length; i++) if (!Number.isFinite(values[i]!)) return false;
  return true;
}
