/**
 * `compareAtSize`: held-out, threshold-free comparison of gain schemes at one fixed size of site
 * modulation. Every scheme's gain is scaled so that its weighted mean |g − 1| at the site (the sweep's
 * "site activity change", weights from the fitting set) equals the same target, so no scheme wins by
 * simply modulating more. Gains come from tables computed on the fitting stimuli; detection is measured
 * on other (held-out) stimuli, as the change in ROC area of the cued category's readout, averaged over
 * cued categories, with a percentile bootstrap interval over the held-out stimuli (the same resamples
 * for every scheme, so differences are paired).
 *
 * References reported beside the schemes:
 * - `shuffled`: the tuning gains permuted across channels (same values, no relation to the category);
 * - criterion shift: a constant shift of the baseline readout that reproduces each scheme's false-alarm
 *   rate at the fixed threshold — it changes the hit rate but, being monotone, not the ROC area;
 * - `ceiling`: the gain of the same size fitted to maximise the ROC area on the fitting stimuli.
 * Optionally `tuning-all`: tuning-based gain at S sites at once, each with 1/S of the size, and its
 * shuffled counterpart `shuffled-all`.
 */
import { bootstrapIntervals } from '../stats/bootstrap.js';
import { criterionShiftControl, rocAuc, rocAucWeighted, rocOrder } from '../stats/roc.js';
import { UsageError, nameList } from '../errors.js';
import type { LoadedModel } from '../graph/load-model.js';
import { gainFromValues, normaliseAcrossCategories } from '../modulation/gain-pattern.js';
import { shuffleChannels } from '../modulation/shuffle.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { channelWeights, fitSiteCeilings, gainSize } from './ceiling.js';
import { chooseThreshold } from '../compare/diff-task.js';
import { categoryColumn, categoryReadout } from '../compare/category-readout.js';
import type { ReadoutMap } from '../graph/category-map.js';
import { scoreGains } from './gain-scores.js';
import type { ModelInspection } from '../record/inspect-model.js';
import type { ModulationTables } from './modulation-tables.js';

/** Options of `compareAtSize`. */
export interface SizeMatchedOptions {
  model: LoadedModel;
  inspection: ModelInspection;
  /** Baseline of the stimuli the tables came from (and the ceiling is fitted on). */
  fit: Snapshot;
  /** Baseline of the stimuli detection is measured on. */
  heldOut: Snapshot;
  /** Single-site comparisons at each of these sites. */
  sites: readonly string[];
  /** Sites of the `tuning-all` scheme (none: no such row). */
  allSites?: readonly string[];
  categories: readonly string[];
  /** Target weighted mean |g − 1| at a site (e.g. 0.1 for 10 %). */
  size: number;
  /** Tuning (needed) and sensitivity (optional) lookups. */
  tables: ModulationTables;
  /** Readout map: each category scores the log-sum-exp of its readout units (default: the sidecar's units). */
  readoutMap?: ReadoutMap;
  /** Seeds of the shuffled control (default 3). */
  controlSeeds?: number;
  /** Bootstrap resamples of the held-out stimuli (default 500). */
  resamples?: number;
  seed?: number;
  threads?: number;
  /** Called as the long parts finish: each site's ceiling fit, then each group of gains scored on the held-out set (for a progress bar; the total grows once the groups are known). */
  onProgress?: (done: number, total: number, detail: string) => void;
}

/** A percentile interval (95 %). */
export interface Interval {
  estimate: number;
  low: number;
  high: number;
}

/** One scheme at one site (or at all `allSites` at once). */
export interface SchemeEffect {
  /** `tuning`, `sensitivity`, `shuffled`, `ceiling`, `tuning-all` or `shuffled-all`. */
  scheme: string;
  /** The site, or the sites joined by `+` for `tuning-all`. */
  site: string;
  /** Weighted mean |g − 1| applied (mean over categories; per site for `tuning-all`). */
  size: number;
  /** Held-out ROC area change, mean over cued categories, with its bootstrap interval. */
  aucChange: Interval;
  /** aucChange / the ceiling's aucChange at the same site; null for the ceiling itself, for `tuning-all`, and where the ceiling's interval is not above 0. */
  fractionOfCeiling: number | null;
  /** Mean hit-rate and false-alarm-rate change at the fixed threshold, percentage points. */
  hitRatePp: number;
  falseAlarmRatePp: number;
  /** Ceiling rows: the fit's ROC-area change on the fitting stimuli (linearised readout), mean over categories; null otherwise. */
  fitSetAucChange: number | null;
  /** Hit-rate change of the criterion-shift control: the baseline shifted to this scheme's false-alarm rate. */
  criterionShiftHitRatePp: number;
  perCategory: Array<{ category: string; baseAuc: number; modAuc: number; aucChange: number }>;
}

/** The comparison. */
export interface SizeMatchedComparison {
  kind: 'size-matched';
  /** Folders of the fitting and the held-out baselines, and whether they differ. */
  fitSet: string;
  heldOutSet: string;
  heldOut: boolean;
  size: number;
  categories: string[];
  resamples: number;
  level: number;
  /** Mean held-out ROC area of the unmodulated network over the cued categories. */
  baseAuc: number;
  effects: SchemeEffect[];
  /** Tuning minus shuffled ROC-area change per site (and tuning-all minus shuffled-all), paired bootstrap interval. */
  versusShuffled: Array<{ site: string; difference: Interval }>;
}

/** Bisection for the strength β ≥ 0 at which max(0, 1 + β·v) has weighted size `size` (the largest reachable when smaller). */
export function gainOfSize(values: Float64Array, weights: ArrayLike<number>, size: number): Float32Array {
  const at = (beta: number) => gainFromValues(values, beta);
  let high = 1;
  for (let i = 0; i < 60 && gainSize(at(high), weights) < size; i++) high *= 2;
  let low = 0;
  for (let i = 0; i < 60; i++) {
    const mid = (low + high) / 2;
    if (gainSize(at(mid), weights) < size) low = mid;
    else high = mid;
  }
  return Float32Array.from(at(high));
}

/**
 * Runs the comparison (see the file comment).
 * @throws UsageError when the tables lack tuning values, a site or category is missing, or the size is
 *   not a positive number.
 */
export async function compareAtSize(options: SizeMatchedOptions): Promise<SizeMatchedComparison> {
  const { fit, heldOut, size } = options;
  if (!(size > 0) || !Number.isFinite(size)) throw new UsageError('E_COMPARE', `comparison size ${size} must be a positive fraction (e.g. 0.1)`);
  const tuning = options.tables.tables.tuning;
  if (!tuning) throw new UsageError('E_COMPARE', 'the size-matched comparison needs a tuning table');
  const sensitivity = options.tables.tables.sensitivity;
  const tableCategories = options.tables.categories;
  const categories = [...options.categories];
  const seeds = options.controlSeeds ?? 3;
  const readout = categoryReadout(heldOut, options.readoutMap);
  const n = heldOut.manifest.stimuli.count;
  const normalised = (lookup: NonNullable<typeof tuning>, site: string, category: string): Float64Array => {
    const rows = tableCategories.map((c) => {
      const row = lookup(site, c);
      if (!row) throw new UsageError('E_COMPARE', `the table has no values for site "${site}", category "${c}"`);
      return row;
    });
    return normaliseAcrossCategories(rows)[tableCategories.indexOf(category)]!;
  };

  // patterns[p] = one gain vector per site of `group.sites`; labels say what each pattern is
  interface Group {
    sites: string[];
    patterns: Float32Array[][];
    labels: Array<{ scheme: string; category: string; size: number; fitGain?: number }>;
  }
  const groups: Group[] = [];
  let steps = 0;
  for (const site of options.sites) {
    const weights = await channelWeights(fit, site);
    const C = weights.length;
    const group: Group = { sites: [site], patterns: [[new Float32Array(C).fill(1)]], labels: [{ scheme: 'none', category: '', size: 0 }] };
    const add = (scheme: string, category: string, gain: Float32Array) => {
      group.patterns.push([gain]);
      group.labels.push({ scheme, category, size: gainSize(gain, weights) });
    };
    const ceilings = await fitSiteCeilings({ model: options.model, inspection: options.inspection, fit, site, categories, budget: () => size, threads: options.threads ?? 0, ...(options.readoutMap ? { readoutMap: options.readoutMap } : {}) });
    steps++;
    options.onProgress?.(steps, 2 * options.sites.length + (options.allSites && options.allSites.length > 1 ? 1 : 0), `ceiling at ${site}`);
    for (const category of categories) {
      const t = normalised(tuning, site, category);
      add('tuning', category, gainOfSize(t, weights, size));
      if (sensitivity) add('sensitivity', category, gainOfSize(normalised(sensitivity, site, category), weights, size));
      for (let seed = 1; seed <= seeds; seed++) add('shuffled', category, gainOfSize(shuffleChannels(t, seed, site, category), weights, size));
      const ceiling = ceilings.find((c) => c.category === category)!;
      add('ceiling', category, ceiling.gain);
      group.labels[group.labels.length - 1]!.fitGain = ceiling.fit.linearAuc - ceiling.fit.baseAuc;
    }
    groups.push(group);
  }
  if (options.allSites && options.allSites.length > 0) {
    const sites = [...options.allSites];
    const weights = await Promise.all(sites.map((site) => channelWeights(fit, site)));
    const group: Group = { sites, patterns: [weights.map((w) => new Float32Array(w.length).fill(1))], labels: [{ scheme: 'none', category: '', size: 0 }] };
    for (const category of categories) {
      const gains = sites.map((site, s) => gainOfSize(normalised(tuning, site, category), weights[s]!, size / sites.length));
      group.patterns.push(gains);
      group.labels.push({ scheme: 'tuning-all', category, size: gains.reduce((a, g, s) => a + gainSize(g, weights[s]!), 0) / sites.length });
    }
    // one shuffled seed per category here: every pattern of this group replays the whole network below the first site
    for (const category of categories) {
      for (const seed of [1]) {
        const gains = sites.map((site, s) => gainOfSize(shuffleChannels(normalised(tuning, site, category), seed, site, category), weights[s]!, size / sites.length));
        group.patterns.push(gains);
        group.labels.push({ scheme: 'shuffled-all', category, size: gains.reduce((a, g, s) => a + gainSize(g, weights[s]!), 0) / sites.length });
      }
    }
    groups.push(group);
  }

  // held-out scores of every pattern, one column per category
  const signalOf = new Map<string, Uint8Array>();
  for (const category of categories) {
    const signal = new Uint8Array(n);
    for (let i = 0; i < n; i++) signal[i] = heldOut.stimuli.labels[i]!.includes(category) ? 1 : 0;
    signalOf.set(category, signal);
  }
  const column = (scores: Float64Array, category: string): Float64Array => {
    if (!readout.unitsOf(category)) throw new UsageError('E_COMPARE', `category "${category}" is not a readout unit (units: ${nameList(readout.kinds)})`);
    return categoryColumn(readout, scores, n, category); // [n, units] → the category's (log-sum-exp) score
  };
  interface Row {
    scheme: string;
    site: string;
    /** Per category: the modulated score columns (several for shuffled seeds). */
    mod: Map<string, Float64Array[]>;
    sizes: number[];
    fitGains: number[];
  }
  const rows: Row[] = [];
  let base: Map<string, Float64Array> | null = null;
  for (const group of groups) {
    const scored = await scoreGains({ model: options.model, inspection: options.inspection, baseline: heldOut, sites: group.sites, gains: group.patterns, readout: readout.layer, threads: options.threads ?? 0 });
    steps++;
    options.onProgress?.(steps, options.sites.length + groups.length, `held-out scores at ${group.sites.length > 1 ? 'all sites' : group.sites[0]!}`);
    if (!base) base = new Map(categories.map((c) => [c, column(scored[0]!, c)]));
    const site = group.sites.join('+');
    group.labels.forEach((label, p) => {
      if (label.scheme === 'none') return;
      let row = rows.find((r) => r.scheme === label.scheme && r.site === site);
      if (!row) rows.push((row = { scheme: label.scheme, site, mod: new Map(), sizes: [], fitGains: [] }));
      const list = row.mod.get(label.category) ?? [];
      list.push(column(scored[p]!, label.category));
      row.mod.set(label.category, list);
      row.sizes.push(label.size);
      if (label.fitGain !== undefined) row.fitGains.push(label.fitGain);
    });
  }
  const baseScores = base!;
  const thresholds = new Map(categories.map((c) => [c, chooseThreshold('auto', readout.threshold, baseScores.get(c)!, signalOf.get(c)!)]));

  // statistics of one resample: per row the mean ΔAUC over categories, then tuning − shuffled per site
  const pairs: Array<{ site: string; t: number; sh: number }> = [];
  for (const row of rows) {
    const control = row.scheme === 'tuning' ? 'shuffled' : row.scheme === 'tuning-all' ? 'shuffled-all' : null;
    const sh = rows.findIndex((r) => r.scheme === control && r.site === row.site);
    if (control && sh >= 0) pairs.push({ site: row.site, t: rows.indexOf(row), sh });
  }
  // each score column sorted once; a resample is a count per stimulus, so its ROC area is one O(n) walk
  const orders = new Map<Float64Array, Int32Array>();
  const orderOf = (scores: Float64Array): Int32Array => {
    let order = orders.get(scores);
    if (!order) orders.set(scores, (order = rocOrder(scores)));
    return order;
  };
  const counts = new Float64Array(n);
  const aucOn = (scores: Float64Array, signal: Uint8Array): number => rocAucWeighted(scores, signal, counts, orderOf(scores));
  const statistics = (indices: Int32Array, out: Float64Array): void => {
    counts.fill(0);
    for (let i = 0; i < n; i++) counts[indices[i]!] += 1;
    const baseAuc = new Map(categories.map((c) => [c, aucOn(baseScores.get(c)!, signalOf.get(c)!)]));
    rows.forEach((row, r) => {
      let total = 0;
      for (const category of categories) {
        const list = row.mod.get(category)!;
        let change = 0;
        for (const scores of list) change += (aucOn(scores, signalOf.get(category)!) - baseAuc.get(category)!) / list.length;
        total += change / categories.length;
      }
      out[r] = total;
    });
    pairs.forEach((pair, p) => (out[rows.length + p] = out[pair.t]! - out[pair.sh]!));
  };
  const resamples = options.resamples ?? 500;
  const intervals = bootstrapIntervals(n, statistics, rows.length + pairs.length, { resamples, seed: options.seed ?? 1 });
  const interval = (i: number): Interval => ({ estimate: intervals[i]!.estimate, low: intervals[i]!.low, high: intervals[i]!.high });

  const effects: SchemeEffect[] = rows.map((row, r) => {
    let hit = 0;
    let fa = 0;
    let shiftHit = 0;
    const perCategory: SchemeEffect['perCategory'] = [];
    for (const category of categories) {
      const signal = signalOf.get(category)!;
      const b = baseScores.get(category)!;
      const threshold = thresholds.get(category)!;
      const baseRates = rates(b, signal, threshold);
      const list = row.mod.get(category)!;
      let modAuc = 0;
      for (const scores of list) {
        const m = rates(scores, signal, threshold);
        hit += (100 * (m.hit - baseRates.hit)) / list.length / categories.length;
        fa += (100 * (m.fa - baseRates.fa)) / list.length / categories.length;
        shiftHit += (100 * (criterionShiftControl(b, signal, threshold, m.fa).hitRate - baseRates.hit)) / list.length / categories.length;
        modAuc += rocAuc(scores, signal) / list.length;
      }
      const baseAuc = rocAuc(b, signal);
      perCategory.push({ category, baseAuc, modAuc, aucChange: modAuc - baseAuc });
    }
    return { scheme: row.scheme, site: row.site, size: row.sizes.reduce((a, s) => a + s, 0) / row.sizes.length, aucChange: interval(r), fractionOfCeiling: null, fitSetAucChange: row.fitGains.length > 0 ? row.fitGains.reduce((a, g) => a + g, 0) / row.fitGains.length : null, hitRatePp: hit, falseAlarmRatePp: fa, criterionShiftHitRatePp: shiftHit, perCategory };
  });
  for (const effect of effects) {
    const ceiling = effects.find((e) => e.scheme === 'ceiling' && e.site === effect.site);
    if (ceiling && effect.scheme !== 'ceiling' && ceiling.aucChange.low > 0) effect.fractionOfCeiling = effect.aucChange.estimate / ceiling.aucChange.estimate;
  }
  const baseAuc = categories.reduce((a, c) => a + rocAuc(baseScores.get(c)!, signalOf.get(c)!), 0) / categories.length;
  return {
    kind: 'size-matched',
    fitSet: fit.folder,
    heldOutSet: heldOut.folder,
    heldOut: fit.folder !== heldOut.folder,
    size,
    categories,
    resamples,
    level: intervals[0]?.level ?? 0.95,
    baseAuc,
    effects,
    versusShuffled: pairs.map((pair, p) => ({ site: pair.site, difference: interval(rows.length + p) })),
  };
}

/** Hit and false-alarm rates of "yes when score > threshold". */
function rates(scores: Float64Array, signal: Uint8Array, threshold: number): { hit: number; fa: number } {
  let hits = 0;
  let signals = 0;
  let falseAlarms = 0;
  let noises = 0;
  for (let i = 0; i < scores.length; i++) {
    if (signal[i]) {
      signals++;
      if (scores[i]! > threshold) hits++;
    } else {
      noises++;
      if (scores[i]! > threshold) falseAlarms++;
    }
  }
  return { hit: hits / signals, fa: falseAlarms / noises };
}
