/**
 * `runSizeMatched`: the size-matched comparison (`compareAtSize`) from files — a model, the fitting
 * baseline the tables came from, the held-out baseline detection is measured on, a tuning table and
 * optionally a sensitivity table — checked at the boundary and written as the JSON the HTML report
 * reads (`kind: "size-matched"`). This is what `sonde size-matched` runs.
 */
import { UsageError } from '../errors.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { replaceFile } from '../disk/atomic-file.js';
import { assertOutFileWritable } from '../outputs/output-file.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { assertSameReadoutMap, categoryReadout } from '../compare/category-readout.js';
import { mapTag, type ReadoutMap, type ReadoutMapTag } from '../graph/category-map.js';
import { parseDetectionTask } from '../compare/diff-task.js';
import { assertSameModel } from '../record/record-modulated.js';
import { inspectModel } from '../record/inspect-model.js';
import { describeEvaluation, type SweepEvaluation } from './held-out.js';
import { loadModulationTables } from './modulation-tables.js';
import { chooseSites } from './sense-plan.js';
import { compareAtSize, type SizeMatchedComparison } from './size-matched.js';

/** Options of `runSizeMatched`. */
export interface SizeMatchedRunOptions {
  /** Called as ceiling fits and held-out scoring finish (see `SizeMatchedOptions.onProgress`). */
  onProgress?: (done: number, total: number, detail: string) => void;
  /** The ONNX model (path or loaded), the one both baselines were recorded from. */
  model: string | LoadedModel;
  /** Baseline the tables were computed from; the ceiling is fitted on it and it weights the size. */
  fit: string;
  /** Baseline detection is measured on (held out when it differs from `fit`). */
  from: string;
  /** Sites compared one at a time. */
  sites: readonly string[];
  /** Sites of the `tuning-all` row (tuning gain at all of them at once, each 1/S of the size); none: no such row. */
  allSites?: readonly string[];
  /** Target weighted mean |g − 1| at a site, a fraction (0.1 = 10 %). */
  size: number;
  /** `detect:all` (default: every category with a readout unit, labelled stimuli and table values) or `detect:A,B`. */
  task?: string;
  /** Tuning table (`sonde tune`). */
  tuning: string;
  /** Readout map (`--readout-map`): categories scored by the log-sum-exp of their units; the tables must be made under the same map. */
  readoutMap?: ReadoutMap;
  /** Sensitivity table (`sonde sense`): adds the `sensitivity` rows. */
  sensitivity?: string;
  /** Seeds of the shuffled control (default 3). */
  controlSeeds?: number;
  /** Bootstrap resamples over held-out stimuli (default 500). */
  resamples?: number;
  /** Seed of the bootstrap (default 1). */
  seed?: number;
  threads?: number;
  /** Write the comparison here (an existing file only with `force`). */
  out?: string;
  force?: boolean;
}

/** The comparison plus where its tables came from. */
export type SizeMatchedRun = SizeMatchedComparison & { evaluation: SweepEvaluation; /** The readout map the categories were scored by, when one was given. */ readoutMap?: ReadoutMapTag };

/**
 * Checks the inputs, runs `compareAtSize` and writes `out`.
 * @throws UsageError for a size outside (0, 1], a baseline of another model or a modulated one, an
 *   unknown site, a category without a readout unit, stimuli of both kinds in each set, or table
 *   values; an existing `out` without `force`; RuntimeFailure when writing fails.
 */
export async function runSizeMatched(options: SizeMatchedRunOptions): Promise<SizeMatchedRun> {
  const modelPath = typeof options.model === 'string' ? options.model : options.model.path;
  if (options.out !== undefined) {
    assertOutFileWritable(options.out, { force: options.force ?? false, inputs: [{ option: 'MODEL', path: modelPath, file: true }, { option: '--fit', path: options.fit }, { option: '--from', path: options.from }, { option: '--tuning', path: options.tuning, file: true }, { option: '--sensitivity', path: options.sensitivity, file: true }] });
  }
  if (!Number.isFinite(options.size) || !(options.size > 0) || options.size > 1) {
    throw new UsageError('E_COMPARE', `--size ${options.size} must be a fraction in (0, 1], the weighted mean |g − 1| at a site`, { hint: 'e.g. --size 0.1 for 10 % (the range of attention-related rate changes)' });
  }
  const model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
  const fit = openSnapshot(options.fit);
  const heldOut = openSnapshot(options.from);
  assertSameModel(fit, model, options.fit);
  assertSameModel(heldOut, model, options.from);
  const inspection = await inspectModel(model);
  // first: a comparison under another readout map than its tables (or under none) cannot pair with them
  const tables = loadModulationTables({ tuning: options.tuning, ...(options.sensitivity !== undefined ? { sensitivity: options.sensitivity } : {}) });
  assertSameReadoutMap({ what: 'this comparison', tag: mapTag(options.readoutMap) }, { what: `--tuning ${options.tuning}`, tag: tables.readoutMap });
  const readout = categoryReadout(heldOut, options.readoutMap);
  const sites = chooseSites(options.sites, inspection, readout.layer);
  const allSites = options.allSites && options.allSites.length > 0 ? chooseSites(options.allSites, inspection, readout.layer) : [];
  for (const site of new Set([...sites, ...allSites])) {
    for (const [snapshot, option] of [[fit, '--fit'], [heldOut, '--from']] as const) assertRecorded(snapshot, site, option);
  }
  const task = options.task ?? 'detect:all';
  const every = task === 'detect:all' || task === 'labels';
  // detect:all keeps the categories the tables have; a named category without table values is refused below
  const categories = parseDetectionTask(task, readout.kinds, heldOut.categories).filter((c) => !every || tables.categories.includes(c));
  if (categories.length === 0) {
    throw new UsageError('E_COMPARE', `no category has a readout unit, labelled stimuli in --from ${options.from} and values in --tuning ${options.tuning} (table categories: ${shortList(tables.categories)}; readout units: ${shortList(readout.kinds)})`, { hint: 'make the tables from a baseline labelled with the readout\'s categories' });
  }
  for (const category of categories) {
    if (!tables.categories.includes(category)) throw new UsageError('E_COMPARE', `category "${category}" has no values in --tuning ${options.tuning} (its categories: ${shortList(tables.categories)})`, { hint: 'tune a baseline labelled with this category, or leave it out of --task' });
    assertBothKinds(fit, category, '--fit');
    assertBothKinds(heldOut, category, '--from');
  }
  for (const site of new Set([...sites, ...allSites])) {
    if (!tables.layers.tuning.includes(site)) throw new UsageError('E_COMPARE', `--tuning ${options.tuning} has no values for site "${site}"`, { hint: 'tune every layer (the default of `sonde tune`) or drop the site' });
    if (options.sensitivity !== undefined && sites.includes(site) && !tables.layers.sensitivity.includes(site)) {
      throw new UsageError('E_COMPARE', `--sensitivity ${options.sensitivity} has no values for site "${site}"`, { hint: `run \`sonde sense MODEL --from ${options.fit} --site ${site} --stimuli-of each\`, or drop --sensitivity` });
    }
  }
  const comparison = await compareAtSize({
    model,
    inspection,
    fit,
    heldOut,
    sites,
    ...(allSites.length > 0 ? { allSites } : {}),
    categories,
    size: options.size,
    tables,
    ...(options.readoutMap ? { readoutMap: options.readoutMap } : {}),
    ...(options.controlSeeds !== undefined ? { controlSeeds: options.controlSeeds } : {}),
    ...(options.resamples !== undefined ? { resamples: options.resamples } : {}),
    ...(options.seed !== undefined ? { seed: options.seed } : {}),
    threads: options.threads ?? 0,
    ...(options.onProgress ? { onProgress: options.onProgress } : {}),
  });
  const result: SizeMatchedRun = { ...comparison, evaluation: describeEvaluation(options.from, { tuning: options.tuning, sensitivity: options.sensitivity }), ...(readout.map ? { readoutMap: mapTag(readout.map)! } : {}) };
  if (options.out !== undefined) replaceFile(options.out, `${JSON.stringify(result, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
  return result;
}

function assertRecorded(snapshot: Snapshot, site: string, option: string): void {
  const layer = snapshot.manifest.layers.find((l) => l.name === site);
  if (!layer) throw new UsageError('E_COMPARE', `${option} ${snapshot.folder} did not record site "${site}"`, { hint: 'record the baseline with its default layers (or --layers including the site)' });
}

function assertBothKinds(snapshot: Snapshot, category: string, option: string): void {
  let signal = 0;
  const n = snapshot.stimuli.labels.length;
  for (const labels of snapshot.stimuli.labels) if (labels.includes(category)) signal++;
  if (signal === 0 || signal === n) {
    throw new UsageError('E_COMPARE', `${option} ${snapshot.folder}: ${signal === 0 ? 'no' : 'every'} stimulus is labelled "${category}", so its ROC area is undefined`, { hint: 'use a stimulus set with displays with and without each compared category' });
  }
}

/** At most 8 names, then a count (category lists can have 1000 entries). */
function shortList(names: readonly string[]): string {
  return names.length <= 8 ? names.join(', ') : `${names.slice(0, 8).join(', ')}, … (${names.length} in all)`;
}
