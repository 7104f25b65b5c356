/**
 * The gain ceiling at a site: for each cued category, the per-channel gain of a given size that
 * maximises the ROC area of that category's readout on a fitting set (see `analysis/gain-ceiling.ts`).
 * The derivatives ∂readout/∂g_k are exact: per-stimulus gradients of the downstream part on the fitting
 * baseline (`exactGainJacobian`, one forward and backward run per stimulus and category); a site whose
 * downstream part has an operator without a gradient rule falls back to forward differences (C + 1
 * replays, `scoreGains`). The fitted gain is then measured on other stimuli by the caller, so the ceiling
 * is a held-out figure like the schemes it is compared with.
 */
import { fitGainCeiling, type GainCeilingFit } from '../analysis/gain-ceiling.js';
import { UsageError, nameList } from '../errors.js';
import type { LoadedModel } from '../graph/load-model.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { categoryReadout, type CategoryReadout } from '../compare/category-readout.js';
import type { ReadoutMap } from '../graph/category-map.js';
import { withCategoryScores } from '../graph/category-scores.js';
import { groupColumn } from '../stats/log-sum-exp.js';
import { inspectModel } from '../record/inspect-model.js';
import { scoreGains } from './gain-scores.js';
import { exactGainJacobian } from './sense-exact.js';
import type { ModelInspection } from '../record/inspect-model.js';

/** Options of `fitSiteCeilings`. */
export interface SiteCeilingOptions {
  model: LoadedModel;
  inspection: ModelInspection;
  /** The stimuli the gain is fitted on (the ones the tuning and sensitivity tables came from). */
  fit: Snapshot;
  site: string;
  /** Cued categories (readout units named by the model's sidecar, or the categories of `readoutMap`). */
  categories: readonly string[];
  /** Readout map: each category scores the log-sum-exp of its units (default: the sidecar's units). */
  readoutMap?: ReadoutMap;
  /** Allowed weighted mean |g − 1| at the site, per category. */
  budget: (category: string) => number;
  /**
   * Early stopping (default true): fit on every other fitting stimulus and keep the step whose gain
   * gives the largest ROC area on the others, so the ceiling does not simply memorise the fitting set.
   */
  earlyStopping?: boolean;
  /** Forward-difference step of the derivatives where the exact ones are not available (default 0.01). */
  step?: number;
  threads?: number;
}

/** One fitted ceiling gain. */
export interface SiteCeiling {
  site: string;
  category: string;
  budget: number;
  gain: Float32Array;
  /** The fit on the fitting stimuli (linearised ROC areas, size, τ). */
  fit: Omit<GainCeilingFit, 'gain'>;
  /** How the derivatives were computed: `exact` gradients, or `forward` differences (fallback). */
  derivatives: 'exact' | 'forward';
}

/**
 * Weight of each channel in the size of a gain: its mean non-negative activity over a baseline's
 * stimuli (the weighting of a sweep cell's site activity change).
 */
export async function channelWeights(baseline: Snapshot, site: string): Promise<Float64Array> {
  const n = baseline.manifest.stimuli.count;
  const { channels } = baseline.layerGeometry(site);
  const means = await baseline.readChannelMeans(site);
  const weight = new Float64Array(channels);
  for (let i = 0; i < n; i++) for (let k = 0; k < channels; k++) weight[k] += Math.max(0, means[i * channels + k]!) / n; // [n, C]: i*C + k
  return weight;
}

/** Weighted mean |g_k − 1| (NaN when every weight is 0). */
export function gainSize(gain: ArrayLike<number>, weights: ArrayLike<number>): number {
  let size = 0;
  let total = 0;
  for (let k = 0; k < gain.length; k++) {
    size += weights[k]! * Math.abs(gain[k]! - 1);
    total += weights[k]!;
  }
  return total > 0 ? size / total : Number.NaN;
}

/**
 * Fits the ceiling gain at one site for every category: the readout and its exact gain derivatives on the
 * fitting baseline, then one constrained fit per category. Where the gradient graph cannot be built (an
 * operator without a rule) the derivatives are forward differences of C + 1 replays (g = 1, and g = 1 + h
 * on each channel in turn; error O(h) where the readout curves). The fitted gain is only a candidate —
 * its held-out effect is measured on the real network, not on the expansion.
 * @throws UsageError for a category the readout does not name, a bad step, or a site whose downstream
 *   part the baseline cannot feed.
 */
export async function fitSiteCeilings(options: SiteCeilingOptions): Promise<SiteCeiling[]> {
  const { fit, site } = options;
  const h = options.step ?? 0.01;
  if (!(h > 0 && h < 1)) throw new UsageError('E_CEILING', `ceiling step ${h} must be in (0, 1)`);
  const readout = categoryReadout(fit, options.readoutMap);
  const C = fit.layerGeometry(site).channels;
  const n = fit.manifest.stimuli.count;
  const groups = options.categories.map((category) => {
    const units = readout.unitsOf(category);
    if (!units) throw new UsageError('E_CEILING', `ceiling: category "${category}" is not a readout unit (units: ${nameList(readout.kinds)})`);
    return units;
  });
  const derivatives = await readoutDerivatives(options, readout, groups, C, n, h);
  const weights = await channelWeights(fit, site);
  return options.categories.map((category, c) => {
    const scores = derivatives.scores[c]!;
    const signal = new Uint8Array(n);
    const jacobian = derivatives.jacobian[c]!; // [n, C]: i*C + k
    for (let i = 0; i < n; i++) signal[i] = fit.stimuli.labels[i]!.includes(category) ? 1 : 0;
    const budget = options.budget(category);
    const validation = options.earlyStopping === false ? undefined : Uint8Array.from({ length: n }, (_, i) => i % 2);
    const { gain, ...rest } = fitGainCeiling({ scores, jacobian, channels: C, isSignal: signal, weights, budget, ...(validation ? { validation } : {}) });
    return { site, category, budget, gain: Float32Array.from(gain), fit: rest, derivatives: derivatives.method };
  });
}

/**
 * Per category: its readout score [n] and gain derivatives [n, C], exact or forward differences as a
 * fallback. A category of several units (a readout map) scores the log-sum-exp of its units: its exact
 * derivatives come from the category scores appended to the graph (src/graph/category-scores.ts), its
 * forward differences from the log-sum-exp of replayed readouts.
 */
async function readoutDerivatives(options: SiteCeilingOptions, readout: CategoryReadout, groups: ReadonlyArray<readonly number[]>, C: number, n: number, h: number): Promise<{ scores: Float64Array[]; jacobian: Float64Array[]; method: 'exact' | 'forward' }> {
  const width = readout.width;
  try {
    if (readout.map) {
      const scored = withCategoryScores(options.model, readout.layer, groups);
      const inspection = await inspectModel(scored.model);
      const exact = await exactGainJacobian({ model: scored.model, inspection, baseline: options.fit, site: options.site, readout: scored.output, units: groups.map((_, g) => g), threads: options.threads ?? 0 });
      return { scores: groups.map((_, g) => groupColumn(exact.scores, n, groups.length, [g])), jacobian: exact.jacobian, method: 'exact' };
    }
    const units = groups.map((g) => g[0]!);
    const exact = await exactGainJacobian({ model: options.model, inspection: options.inspection, baseline: options.fit, site: options.site, readout: readout.layer, units, threads: options.threads ?? 0 });
    return { scores: groups.map((g) => groupColumn(exact.scores, n, width, g)), jacobian: exact.jacobian, method: 'exact' };
  } catch (error) {
    if (!(error instanceof UsageError) || error.code !== 'E_GRADIENT_OP') throw error;
  }
  const patterns: Float32Array[][] = [[new Float32Array(C).fill(1)]];
  for (let k = 0; k < C; k++) {
    const g = new Float32Array(C).fill(1);
    g[k] = 1 + h;
    patterns.push([g]);
  }
  const scored = await scoreGains({ model: options.model, inspection: options.inspection, baseline: options.fit, sites: [options.site], gains: patterns, readout: readout.layer, threads: options.threads ?? 0 });
  const scores = groups.map((g) => groupColumn(scored[0]!, n, width, g));
  const jacobian = groups.map((g, c) => {
    const out = new Float64Array(n * C);
    const base = scores[c]!;
    for (let k = 0; k < C; k++) {
      const moved = groupColumn(scored[1 + k]!, n, width, g);
      // divided by the float32 step actually applied, fround(1 + h) − 1
      for (let i = 0; i < n; i++) out[i * C + k] = (moved[i]! - base[i]!) / (Math.fround(1 + h) - 1); // [n, C]: i*C + k
    }
    return out;
  });
  return { scores, jacobian, method: 'forward' };
}
