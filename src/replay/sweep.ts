/**
 * `sweepModulations`: schemes × strengths × sites × cued categories, each cell a gain vector at one site,
 * scored by detection on the baseline's stimuli through tail replay (many gain vectors share a runtime
 * call). Cells are appended to a log as they finish, so an interrupted sweep resumes; the summary (best
 * cells, calibration against the attention band, the tuning-vs-shuffled test) is in sweep-summary.ts.
 */
import { appendFileSync, closeSync, existsSync, fsyncSync, openSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { linearFit } from '../stats/correlation.js';
import { readoutChanges } from '../analysis/readout-change.js';
import { rocAuc } from '../stats/roc.js';
import { detectFromScores, type ScoreDetection } from '../stats/signal-detection.js';
import { UsageError } from '../errors.js';
import { exposeForRuntime } from '../graph/instrument.js';
import { injectModulations, modulationInputDims, modulationInputNames, type InjectionSite } from '../graph/inject.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { resolveModulations } from '../modulation/resolve.js';
import { validateModulationSpec } from '../modulation/spec.js';
import type { ResolveContext } from '../modulation/types.js';
import { createNetworkSession } from '../session/network-session.js';
import { openSnapshot, type LayerBatch, type Snapshot } from '../snapshot/snapshot.js';
import { writeSweepTable } from '../snapshot/sweep-table.js';
import { READOUT_MAP_KEY } from '../snapshot/tables.js';
import { chooseThreshold, degenerateThreshold, parseDetectionTask } from '../compare/diff-task.js';
import { assertSameReadoutMap, categoryColumn, categoryReadout, type CategoryReadout } from '../compare/category-readout.js';
import { mapTag, type ReadoutMap } from '../graph/category-map.js';
import { logSumExp } from '../stats/log-sum-exp.js';
import { inspectModel } from '../record/inspect-model.js';
import { assertSameModel, planTail, siteShapes } from '../record/record-modulated.js';
import { shuffleChannels } from '../modulation/shuffle.js';
import { alignedBoundary, replicateRows } from './replicate-feeds.js';
import { evenRows, runBytesOption, runRowBytes, rowsWithin } from '../graph/run-memory.js';
import { shardRange } from '../record/shard.js';
import { ALL_ACTIVATIONS, chooseSites } from './sense-plan.js';
import { SWEEP_SCHEMES, type MatchTarget, type SweepCell, type SweepDepthPoint, type SweepDetection, type SweepMeasure, type SweepResult, type SweepScheme } from './sweep-types.js';
import { loadModulationTables } from './modulation-tables.js';
import { assertSameSweepInputs, isSweepInputsHeader, sweepInputsDigest, sweepInputsHeader, sweepInputsOf, type SweepInputs } from './sweep-inputs.js';
import { assertApartFromInputs, prepareSweepFolder, resolveOutFolder } from '../outputs/output-folder.js';
import { replaceFile } from '../disk/atomic-file.js';
import { describeEvaluation } from './held-out.js';
import { summarise } from './sweep-summary.js';
import { percentileInterval, readoutDraws, sweepResampling } from './sweep-intervals.js';

/** Options of `sweepModulations`. */
export interface SweepOptions {
  model: string | LoadedModel;
  /** Baseline snapshot the modulated runs replay from (sites recorded at full float32 resolution). */
  from: string | Snapshot;
  /** Site tensors, or `all-activations`. */
  sites: string | readonly string[];
  /** Schemes (default: every scheme whose table is given, plus uniform and shuffled when tuning is). */
  schemes?: readonly string[];
  /** Strengths β: tuning/sensitivity/shuffled use g = max(0, 1 + β·v); uniform uses g = 1 + β. */
  strengths: readonly number[];
  /** `detect:CATEGORY[,…]` or `detect:all`: the cued categories (each is attended in turn). */
  task: string;
  /** Readout map (`--readout-map`): categories scored by the log-sum-exp of their readout units; the tables must be made under the same map. */
  readoutMap?: ReadoutMap;
  /** Tuning table (`sonde tune`), needed by `tuning` and `shuffled`. */
  tuning?: string;
  /** Sensitivity table (`sonde sense`), needed by `sensitivity`. */
  sensitivity?: string;
  /** Seeds of the shuffled control (default 3). */
  controlSeeds?: number;
  /** Also measure per-layer relative change and signature slope below the site. */
  depthProfile?: boolean;
  /** Stimuli (the first ones, by index) the depth profile is measured on; default 64. */
  profileStimuli?: number;
  /** Calibration target: `auc:+0.05`, `dprime:+0.5` or `accuracy:+10pp`. */
  match?: string;
  /** Measure `best`, `control` and the summary rank by: `auc` (default, threshold-free) or `dprime` (fixed threshold). */
  measure?: SweepMeasure;
  /** Output folder: `cells.arrow`, `sweep.json`, and `cells.jsonl` (progress, for resuming). */
  out: string;
  /** Start afresh instead of skipping the cells already in `out/cells.jsonl`. */
  restart?: boolean;
  /** Gain vectors evaluated per pass over the stimuli (default 16); a pass is split into runtime calls by `runBytes`. */
  vectorsPerRun?: number;
  /** Bytes of tensors one runtime call may hold (default `DEFAULT_RUN_BYTES`): fewer vectors or stimuli per call where they would exceed it. */
  runBytes?: number;
  /** Runtime threads (0: the runtime chooses). */
  threads?: number;
  /** Decision threshold rule, as in `diffSnapshots` (default `auto`). */
  threshold?: number | 'best' | 'auto';
  /** Called after each finished group of cells. */
  onProgress?: (progress: { cellsDone: number; cellsTotal: number; elapsedSeconds: number }) => void;
  /** Only this shard of the cells (1-based k of n), for job arrays. */
  shard?: { index: number; count: number };
}

interface PlannedCell {
  key: string;
  site: string;
  scheme: SweepScheme;
  strength: number;
  category: string;
  seed: number;
  gain: Float32Array;
}

/** Identity of a gain vector's exact float32 values. */
function vectorKey(gain: Float32Array): string {
  return Buffer.from(gain.buffer, gain.byteOffset, gain.byteLength).toString('base64');
}

/** Stable identity of a cell, used to skip finished cells on resume. */
export function cellKey(site: string, scheme: string, strength: number, category: string, seed: number): string {
  return JSON.stringify([site, scheme, strength, category, seed]);
}

/** Parses `auc:+0.05` / `dprime:+0.5` / `accuracy:+10pp`. */
export function parseMatchTarget(text: string): MatchTarget {
  const match = /^(auc|dprime|accuracy):([+-]?\d+(?:\.\d+)?)(pp)?$/.exec(text.trim());
  if (!match || (match[1] === 'accuracy') !== (match[3] === 'pp')) {
    throw new UsageError('E_MATCH', `--match "${text}" must be auc:+X (ROC-area change), dprime:+X (d′ change) or accuracy:+Xpp (accuracy change in percentage points)`);
  }
  return { measure: match[1] === 'auc' ? 'auc' : match[1] === 'dprime' ? 'dPrime' : 'accuracyPp', value: Number(match[2]) };
}

/** Checks a `--measure` value. */
export function parseSweepMeasure(text: string | undefined): SweepMeasure {
  if (text === undefined) return 'auc';
  if (text !== 'auc' && text !== 'dprime') throw new UsageError('E_MEASURE', `--measure "${text}" is not one of auc, dprime`, { hint: 'auc ranks by the threshold-free ROC area (default); dprime by d′ at the fixed threshold' });
  return text;
}

/** Baseline readout of one cued category: its scores, signal flags, fixed threshold and detection there. */
interface CategoryBase {
  /** Readout units the category's score is the log-sum-exp of (one: the sidecar's unit). */
  units: number[];
  signal: Uint8Array;
  threshold: number;
  base: ScoreDetection;
  scores: Float64Array;
  auc: number;
  /** The baseline answers the same for every display at the threshold (`degenerateThreshold`): no d′ or criterion. */
  degenerate: boolean;
  /** ROC area and d′ of the baseline in every resample of `resampling` (sweep-intervals.ts). */
  draws: { auc: Float64Array; dPrime: Float64Array };
}

/**
 * Sweeps modulation schemes and strengths over sites and cued categories. Every cell is a modulated
 * run of the network part downstream of the site, fed with the baseline's recorded values; several gain
 * vectors share one runtime call (rows = vectors × stimuli). For each cell the detection read-out of the
 * cued category is measured with the baseline's decision threshold held fixed.
 * @throws UsageError for bad options, a scheme without its table, or a site whose downstream part
 *   needs tensors the baseline did not record at full resolution.
 */
export async function sweepModulations(options: SweepOptions): Promise<SweepResult> {
  const started = performance.now();
  // --out NAME without a slash is snapshots/NAME, as for every folder Sonde writes
  options = { ...options, out: resolveOutFolder(options.out) };
  // before anything is read or written: the output must be none of the inputs (nor contain or lie inside one)
  assertApartFromInputs(options.out, '--out', [{ option: 'MODEL', path: typeof options.model === 'string' ? options.model : options.model.path, file: true }, { option: '--from', path: typeof options.from === 'string' ? options.from : options.from.folder }, { option: '--tuning', path: options.tuning, file: true }, { option: '--sensitivity', path: options.sensitivity, file: true }]);
  const model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
  const baseline = typeof options.from === 'string' ? openSnapshot(options.from) : options.from;
  assertSameModel(baseline, model, baseline.folder);
  if (options.strengths.length === 0 || options.strengths.some((s) => !Number.isFinite(s))) {
    throw new UsageError('E_STRENGTHS', `--strengths must be finite numbers, got ${options.strengths.join(',') || 'none'}`);
  }
  const inspection = await inspectModel(model);
  const tables = options.tuning || options.sensitivity ? loadModulationTables({ ...(options.tuning ? { tuning: options.tuning } : {}), ...(options.sensitivity ? { sensitivity: options.sensitivity } : {}) }) : null;
  // first: a sweep under another readout map than its tables (or under none) cannot pair with them
  if (tables) assertSameReadoutMap({ what: 'this sweep', tag: mapTag(options.readoutMap) }, { what: options.tuning ? `--tuning ${options.tuning}` : `--sensitivity ${options.sensitivity}`, tag: tables.readoutMap });
  const readout = categoryReadout(baseline, options.readoutMap);
  const categories = parseDetectionTask(options.task, readout.kinds, baseline.categories);
  const schemes = resolveSchemes(options.schemes, options);
  const sites = (typeof options.sites === 'string' && options.sites === ALL_ACTIVATIONS ? chooseSites(ALL_ACTIVATIONS, inspection, readout.layer) : chooseSites(options.sites, inspection, readout.layer)).filter(
    (site) => typeof options.sites !== 'string' || options.sites !== ALL_ACTIVATIONS || baseline.manifest.layers.some((l) => l.name === site && l.keep === 'full'),
  );
  const seeds = options.controlSeeds ?? 3;
  if (!Number.isInteger(seeds) || seeds < 1) throw new UsageError('E_SEEDS', `--control-seeds must be a positive integer, got ${seeds}`);
  const match = options.match ? parseMatchTarget(options.match) : null;
  runBytesOption(options.runBytes); // a bad budget is refused before the folder is touched
  const measure = parseSweepMeasure(options.measure);
  assertSweepSize({ sites: sites.length, schemes, categories: categories.length, strengths: options.strengths.length, seeds });
  const lock = prepareSweepFolder(options.out);
  try {
    return await sweepLocked(options, { started, model, baseline, inspection, readout, categories, tables, schemes, sites, seeds, match, measure });
  } finally {
    lock.release();
  }
}

/**
 * The most cells one sweep may plan (sites × schemes × cued categories × strengths, shuffled cells once
 * per control seed). Each cell holds a gain vector and costs a downstream replay; far beyond this the
 * plan alone would exhaust memory.
 */
export const MAX_SWEEP_CELLS = 100_000;

/**
 * Refuses a grid over `MAX_SWEEP_CELLS` with its count, before anything is planned.
 * @throws UsageError E_SWEEP_SIZE naming the factors.
 */
export function assertSweepSize(grid: { sites: number; schemes: readonly SweepScheme[]; categories: number; strengths: number; seeds: number }): void {
  const perStrength = grid.schemes.reduce((sum, scheme) => sum + (scheme === 'shuffled' ? grid.seeds : 1), 0);
  const cells = grid.sites * grid.categories * grid.strengths * perStrength;
  if (cells > MAX_SWEEP_CELLS) {
    throw new UsageError('E_SWEEP_SIZE', `this sweep has ${cells} cells (${grid.sites} sites × ${grid.categories} categories × ${grid.strengths} strengths × ${perStrength} scheme runs), more than the ${MAX_SWEEP_CELLS} a sweep may have`, {
      hint: 'use fewer strengths (a larger step), sites or categories, or split it with --shard K/N into several folders',
    });
  }
}

/** What `sweepModulations` resolved before it locked its folder. */
interface LockedSweep {
  started: number;
  model: LoadedModel;
  baseline: Snapshot;
  inspection: Awaited<ReturnType<typeof inspectModel>>;
  readout: CategoryReadout;
  categories: string[];
  tables: ReturnType<typeof loadModulationTables> | null;
  schemes: SweepScheme[];
  sites: string[];
  seeds: number;
  match: MatchTarget | null;
  measure: SweepMeasure;
}

/** The sweep once its folder is locked: cells reused or computed and appended, then summarised. */
async function sweepLocked(options: SweepOptions, s: LockedSweep): Promise<SweepResult> {
  const { started, model, baseline, inspection, readout, categories, tables, schemes, sites, seeds, match, measure } = s;
  const progressPath = join(options.out, 'cells.jsonl');
  const done = new Map<string, SweepCell>();
  // cells are reused only when computed from the same inputs (see sweep-inputs.ts)
  const inputs = sweepInputsOf({ modelSha256: model.sha256, baselineFolder: baseline.folder, tuning: options.tuning, sensitivity: options.sensitivity, task: readout.map ? `${options.task} (readout map ${readout.map.name} sha256:${readout.map.sha256})` : options.task, threshold: options.threshold ?? 'auto', depthProfile: options.depthProfile ?? false, profileStimuli: options.profileStimuli ?? 64 });
  if (!options.restart && existsSync(progressPath)) {
    const headers: { sweepInputs: string; of?: Partial<SweepInputs> }[] = [];
    for (const line of readFileSync(progressPath, 'utf8').split('\n')) {
      if (!line.trim()) continue;
      try {
        const plain = JSON.parse(line) as unknown;
        if (isSweepInputsHeader(plain)) {
          headers.push(plain);
          continue;
        }
        const cell = JSON.parse(line, (_k, v: unknown) => (v === null ? Number.NaN : v)) as SweepCell;
        done.set(cellKey(cell.site, cell.scheme, cell.strength, cell.category, cell.seed), cell);
      } catch {
        // a torn last line from an interruption: that cell is simply redone
      }
    }
    assertSameSweepInputs(progressPath, headers, done.size, inputs);
    if (headers.length === 0) writeFileSync(progressPath, sweepInputsHeader(inputs));
  } else writeFileSync(progressPath, sweepInputsHeader(inputs));

  // thresholds and baseline detection per category (from the baseline's recorded readout)
  const n = baseline.manifest.stimuli.count;
  const units = baseline.layerGeometry(readout.layer).channels;
  const baseScores = await baseline.readChannelMeans(readout.layer);
  const perCategory = new Map<string, CategoryBase>();
  // one set of bootstrap resamples of the stimuli for every cell (intervals of cells and of their means)
  const resampling = sweepResampling(n);
  for (const category of categories) {
    const scores = categoryColumn(readout, baseScores, n, category);
    const signal = new Uint8Array(n);
    for (let i = 0; i < n; i++) signal[i] = baseline.stimuli.labels[i]!.includes(category) ? 1 : 0;
    const threshold = chooseThreshold(options.threshold ?? 'auto', readout.threshold, scores, signal);
    const base = detectFromScores(scores, signal, threshold);
    perCategory.set(category, { units: readout.unitsOf(category)!, signal, threshold, base, degenerate: degenerateThreshold(base, threshold) !== null, scores, auc: rocAuc(scores, signal), draws: readoutDraws(scores, signal, threshold, resampling) });
  }

  const context: ResolveContext = { sites: siteShapes(inspection.layers), siteNames: inspection.layers.map((l) => l.name), categories: tables?.categories ?? categories, ...(tables ? { tables: tables.tables } : {}) };
  const planned: PlannedCell[] = [];
  for (const site of sites) {
    for (const scheme of schemes) {
      for (const category of categories) {
        for (const strength of options.strengths) {
          for (const seed of scheme === 'shuffled' ? Array.from({ length: seeds }, (_, i) => i + 1) : [0]) {
            planned.push({ key: cellKey(site, scheme, strength, category, seed), site, scheme, strength, category, seed, gain: gainVector(site, scheme, strength, category, seed, context) });
          }
        }
      }
    }
  }
  // shard K of N: a contiguous block of the planned cells (same partition as record --shard)
  const range = options.shard ? shardRange(options.shard.index, options.shard.count, planned.length) : { start: 0, end: planned.length };
  const mine = planned.slice(range.start, range.end);
  const todo = mine.filter((c) => !done.has(c.key));
  let finished = mine.length - todo.length;
  const perRun = options.vectorsPerRun ?? 16;
  if (!Number.isInteger(perRun) || perRun < 1) throw new UsageError('E_VECTORS', `vectors per run must be a positive integer, got ${perRun}`);
  const siteWeights = new Map<string, Float64Array>();
  for (const site of sites) {
    const { channels } = baseline.layerGeometry(site);
    const means = await baseline.readChannelMeans(site);
    const weight = new Float64Array(channels);
    for (let i = 0; i < n; i++) for (let k = 0; k < channels; k++) weight[k] += Math.max(0, means[i * channels + k]!) / n;
    siteWeights.set(site, weight);
  }
  const tuningFor = (layer: string, category: string): Float64Array | undefined => tables?.tables.tuning?.(layer, category);
  for (const site of sites) {
    const cells = todo.filter((c) => c.site === site);
    if (cells.length === 0) continue;
    // cells with the same gain vector (strength 0 of every scheme; uniform gain for every cued kind)
    // share one evaluation: chunk by distinct vectors
    const vectorIndex = new Map<string, number>();
    const chunkOf = cells.map((cell) => {
      const key = vectorKey(cell.gain);
      if (!vectorIndex.has(key)) vectorIndex.set(key, vectorIndex.size);
      return Math.floor(vectorIndex.get(key)! / perRun);
    });
    const chunks = Math.ceil(vectorIndex.size / perRun);
    for (let chunk = 0; chunk < chunks; chunk++) {
      const group = cells.filter((_, i) => chunkOf[i] === chunk);
      const results = await evaluateGroup({ model, inspection, baseline, site, group, perCategory, readout: readout.layer, units, depthProfile: options.depthProfile ?? false, profileStimuli: options.profileStimuli ?? 64, tuningFor, threads: options.threads ?? 0, weights: siteWeights.get(site)!, resampling, runBytes: runBytesOption(options.runBytes) });
      const fd = openSync(progressPath, 'a');
      try {
        for (const cell of results) {
          appendFileSync(fd, `${JSON.stringify(cell)}\n`);
          done.set(cellKey(cell.site, cell.scheme, cell.strength, cell.category, cell.seed), cell);
        }
        fsyncSync(fd);
      } finally {
        closeSync(fd);
      }
      finished += results.length;
      options.onProgress?.({ cellsDone: finished, cellsTotal: mine.length, elapsedSeconds: (performance.now() - started) / 1000 });
    }
  }
  const cells = mine.map((c) => done.get(c.key)!);
  const evaluation = describeEvaluation(baseline.folder, { tuning: options.tuning, sensitivity: options.sensitivity });
  const result: SweepResult = { ...summarise(cells, { model, baseline, sites, schemes, strengths: options.strengths, categories, controlSeeds: Array.from({ length: seeds }, (_, i) => i + 1), match, matchText: options.match, measure }), inputs: { digest: sweepInputsDigest(inputs), ...inputs }, evaluation };
  if (readout.map) result.readoutMap = mapTag(readout.map)!;
  writeSweepTable(join(options.out, 'cells.arrow'), cells, readout.map ? { [READOUT_MAP_KEY]: JSON.stringify(result.readoutMap) } : {});
  replaceFile(join(options.out, 'sweep.json'), `${JSON.stringify(result, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
  return result;
}

function resolveSchemes(requested: readonly string[] | undefined, options: SweepOptions): SweepScheme[] {
  const list = requested ?? [...(options.tuning ? ['tuning'] : []), ...(options.sensitivity ? ['sensitivity'] : []), 'uniform', ...(options.tuning ? ['shuffled'] : [])];
  for (const scheme of list) {
    if (!(SWEEP_SCHEMES as readonly string[]).includes(scheme)) throw new UsageError('E_SCHEME', `--schemes: unknown scheme "${scheme}" (known: ${SWEEP_SCHEMES.join(', ')})`);
    if ((scheme === 'tuning' || scheme === 'shuffled') && !options.tuning) throw new UsageError('E_SCHEME', `--schemes ${scheme} needs --tuning TABLE`, { hint: 'make one with: sonde tune BASELINE --out tuning.arrow' });
    if (scheme === 'sensitivity' && !options.sensitivity) throw new UsageError('E_SCHEME', '--schemes sensitivity needs --sensitivity TABLE', { hint: 'make one with: sonde sense MODEL --from BASELINE --site SITE --out sens.arrow' });
  }
  return [...new Set(list)] as SweepScheme[];
}

/** The per-channel gain of one cell. */
function gainVector(site: string, scheme: SweepScheme, strength: number, category: string, seed: number, context: ResolveContext): Float32Array {
  const channels = context.sites.get(site)!.features;
  if (scheme === 'uniform') return new Float32Array(channels).fill(Math.max(0, 1 + strength));
  const kind = scheme === 'sensitivity' ? 'sensitivity' : 'tuning';
  const spec = validateModulationSpec({ site, kind, target: category, strength }, { source: 'sweep' });
  const gain = resolveModulations(spec, context)[0]!.gain;
  // same gains, permuted across channels: no relation to tuning
  return scheme === 'shuffled' ? shuffleChannels(gain, seed, site, category) : gain;
}

interface GroupRun {
  model: LoadedModel;
  inspection: Awaited<ReturnType<typeof inspectModel>>;
  baseline: Snapshot;
  site: string;
  group: PlannedCell[];
  perCategory: Map<string, CategoryBase>;
  readout: string;
  units: number;
  depthProfile: boolean;
  profileStimuli: number;
  tuningFor: (layer: string, category: string) => Float64Array | undefined;
  threads: number;
  weights: Float64Array;
  resampling: Float64Array[];
  /** Bytes of tensors one runtime call may hold. */
  runBytes: number;
}

/** One pass over the baseline's stimuli evaluating a group of gain vectors at one site. */
async function evaluateGroup(run: GroupRun): Promise<SweepCell[]> {
  const { baseline, site, group } = run;
  const layers = baseline.manifest.layers;
  const siteOrdinal = layers.findIndex((l) => l.name === site);
  // depth below the site in weight layers (src/graph/structure.ts), whatever the baseline recorded
  const weightDepthOf = new Map(run.inspection.layers.map((l) => [l.name, l.weightDepth]));
  const profileLayers = run.depthProfile ? layers.filter((l, i) => i >= siteOrdinal && l.keep === 'full') : [];
  const plan = planTail(run.model, run.inspection, baseline, [site], [run.readout, ...profileLayers.map((l) => l.name)]);
  if (!('tail' in plan)) {
    throw new UsageError('E_SWEEP_TAIL', `sweep at "${site}": ${plan.reason}`, { hint: 'record the baseline with --keep full --dtype float32 and the default (or a wider) --layers selector' });
  }
  const tail = plan.tail;
  const profiled = profileLayers.filter((l) => tail.computed.has(l.name) || l.name === site);
  const fetch = [...new Set([run.readout, ...profiled.map((l) => l.name)])];
  const siteShape = baseline.layer(site).shape;
  // features along the site's layout (channels of a map, D of tokens): G is [rows, C, 1, 1] or [rows, 1, D]
  const siteInfo = siteShapes(run.inspection.layers).get(site);
  const injection: InjectionSite = { site, shape: siteShape, spatial: false, featureAxis: siteInfo?.layout.featureAxis ?? 0 };
  const session = await createNetworkSession(exposeForRuntime(injectModulations(tail.model, [injection]), fetch), { threads: run.threads, label: `${run.model.fileName} downstream of ${site}` });
  const vectors: Float32Array[] = [];
  const vectorOfCell: number[] = [];
  const seenVectors = new Map<string, number>();
  for (const cell of group) {
    const key = vectorKey(cell.gain);
    if (!seenVectors.has(key)) {
      seenVectors.set(key, vectors.length);
      vectors.push(cell.gain);
    }
    vectorOfCell.push(seenVectors.get(key)!);
  }
  const M = vectors.length;
  const C = siteInfo?.features ?? siteShape[0]!;
  const n = baseline.manifest.stimuli.count;
  const scores = group.map(() => new Float64Array(n));
  const profileRows = Math.min(n, Math.max(0, run.profileStimuli));
  const geometry = profiled.map((l) => baseline.layerGeometry(l.name));
  const sums = vectors.map(() => profiled.map((_, li) => ({ dd: 0, aa: 0, modMeans: new Float64Array(geometry[li]!.channels), baseMeans: new Float64Array(geometry[li]!.channels) })));
  const boundaryStreams = tail.boundary.map((name) => baseline.readLayer(name));
  const profileStreams = profiled.map((l) => baseline.readLayer(l.name));
  const names = modulationInputNames(site);
  const count = Math.ceil(n / baseline.manifest.run.batch);
  const batchRows = baseline.manifest.run.batch;
  // rows per runtime call (gain vectors × stimuli) from the bytes a call holds (graph/run-memory.ts)
  const injected = injectModulations(tail.model, [injection]);
  const elementsOf = new Map(run.inspection.layers.map((l) => [l.name, l.elements]));
  const rowBytes = runRowBytes(injected, (name) => elementsOf.get(name.endsWith('::raw') ? name.slice(0, -5) : name), { fed: tail.boundary.map((name) => (name === site ? `${name}::raw` : name)), fetched: fetch });
  const cap = rowsWithin(run.runBytes, rowBytes, M * batchRows);
  /** One runtime call: gain vectors [m0, m0 + mc) on the batch's stimuli [i0, i0 + ic); scores and depth sums taken from it. */
  const evaluateCall = async (parts: LayerBatch[], baseBatches: LayerBatch[], first: number, m0: number, mc: number, i0: number, ic: number): Promise<void> => {
    const rows = mc * ic;
    const feeds = replicateRows(parts, tail.boundary, new Set([site]), baseline, i0, ic, mc);
    const gain = new Float32Array(rows * C);
    for (let m = 0; m < mc; m++) for (let i = 0; i < ic; i++) gain.set(vectors[m0 + m]!, (m * ic + i) * C);
    const dims = modulationInputDims(injection, rows);
    feeds[names.gain] = { data: gain, dims };
    feeds[names.offset] = { data: new Float32Array(rows * C), dims };
    const start = first + i0;
    // the depth profile is measured on the first stimuli only: later calls fetch the readout alone
    const profiling = run.depthProfile && start < profileRows;
    const outputs = await session.run(feeds, profiling ? fetch : [run.readout]);
    const readout = outputs[run.readout]!.data;
    group.forEach((cell, c) => {
      const units = run.perCategory.get(cell.category)!.units;
      const m = vectorOfCell[c]! - m0;
      if (m < 0 || m >= mc) return;
      // [mc·ic, units]: row (m*ic + i); one unit's log-sum-exp is its value, bit for bit
      for (let i = 0; i < ic; i++) scores[c]![start + i] = logSumExp(readout, (m * ic + i) * run.units, units);
    });
    if (!profiling) return;
    profiled.forEach((layer, li) => {
      const { channels, spatial, elements } = geometry[li]!;
      const a = baseBatches[li]!.activation!;
      const b = outputs[layer.name]!.data;
      for (let m = 0; m < mc; m++) {
        const acc = sums[m0 + m]![li]!;
        for (let i = 0; i < Math.min(ic, profileRows - start); i++) {
          const aBase = (i0 + i) * elements;
          const bBase = (m * ic + i) * elements;
          for (let k = 0; k < channels; k++) {
            let sa = 0;
            let sb = 0;
            for (let s = 0; s < spatial; s++) {
              const av = a[aBase + k * spatial + s]!;
              const bv = b[bBase + k * spatial + s]!;
              const d = bv - av;
              acc.dd += d * d;
              acc.aa += av * av;
              sa += av;
              sb += bv;
            }
            acc.baseMeans[k] += sa / spatial;
            acc.modMeans[k] += sb / spatial;
          }
        }
      }
    });
  };
  const read = async (): Promise<{ parts: LayerBatch[]; baseBatches: LayerBatch[] }> => {
    const parts = alignedBoundary(await Promise.all(boundaryStreams.map((s) => s.next())), tail.boundary, baseline);
    const baseBatches = (await Promise.all(profileStreams.map((s) => s.next()))).map((p) => p.value as LayerBatch);
    return { parts, baseBatches };
  };
  try {
    // the next baseline batch is read while the calls of the current one run
    let next: Promise<{ parts: LayerBatch[]; baseBatches: LayerBatch[] }> | null = count > 0 ? read() : null;
    for (let k = 0; k < count; k++) {
      const { parts, baseBatches } = await next!;
      next = k + 1 < count ? read() : null;
      next?.catch(() => undefined); // surfaced when awaited
      const rows = parts[0]!.rows;
      const first = parts[0]!.index[0]!;
      // all stimuli of the batch and as many vectors as fit, or one vector and as many stimuli as fit
      const stimuliPerCall = evenRows(rows, Math.min(rows, cap));
      const vectorsPerCall = evenRows(M, Math.max(1, Math.floor(cap / stimuliPerCall)));
      for (let m0 = 0; m0 < M; m0 += vectorsPerCall) {
        for (let i0 = 0; i0 < rows; i0 += stimuliPerCall) await evaluateCall(parts, baseBatches, first, m0, Math.min(vectorsPerCall, M - m0), i0, Math.min(stimuliPerCall, rows - i0));
      }
    }
  } finally {
    await Promise.all([...boundaryStreams, ...profileStreams].map((s) => s.return(undefined)));
    await session.close();
  }
  return group.map((cell, c) => {
    const info = run.perCategory.get(cell.category)!;
    const m = vectorOfCell[c]!;
    const mod = detectFromScores(scores[c]!, info.signal, info.threshold);
    const modAuc = rocAuc(scores[c]!, info.signal);
    const readouts = readoutChanges({ scores: info.scores, signal: info.signal, threshold: info.threshold, detection: info.base }, scores[c]!, mod.falseAlarmRate);
    const draws = readoutDraws(scores[c]!, info.signal, info.threshold, run.resampling);
    const round = (v: number) => (Number.isFinite(v) ? Math.round(v * 1e5) / 1e5 : Number.NaN);
    const aucDraws = Array.from(draws.auc, (v, r) => round(v - info.draws.auc[r]!));
    const dPrimeDraws = Array.from(draws.dPrime, (v, r) => (info.degenerate ? Number.NaN : round(v - info.draws.dPrime[r]!)));
    let activity = 0;
    let weight = 0;
    for (let k = 0; k < C; k++) {
      activity += run.weights[k]! * Math.abs(cell.gain[k]! - 1);
      weight += run.weights[k]!;
    }
    const result: SweepCell = {
      site: cell.site,
      scheme: cell.scheme,
      strength: cell.strength,
      category: cell.category,
      seed: cell.seed,
      base: detection(info.base, info.auc, info.degenerate),
      mod: detection(mod, modAuc, info.degenerate),
      change: {
        // a threshold at which the baseline answers the same for every display gives no d′ (as in diff)
        dPrime: info.degenerate ? Number.NaN : mod.dPrime - info.base.dPrime,
        criterion: info.degenerate ? Number.NaN : mod.criterion - info.base.criterion,
        hitRatePp: 100 * (mod.hitRate - info.base.hitRate),
        falseAlarmRatePp: 100 * (mod.falseAlarmRate - info.base.falseAlarmRate),
        accuracyPp: 100 * (mod.accuracy - info.base.accuracy),
        auc: modAuc - info.auc,
        matchedHitRatePp: readouts.matchedHitRatePp,
        aucCi: percentileInterval(aucDraws),
        dPrimeCi: percentileInterval(dPrimeDraws),
        aucDraws,
        dPrimeDraws,
      },
      criterionControl: info.degenerate ? { ...readouts.criterionControl, dPrime: Number.NaN } : readouts.criterionControl,
      siteActivityChange: weight > 0 ? activity / weight : Number.NaN,
    };
    if (run.depthProfile) {
      result.depthProfile = profiled.map((layer, li): SweepDepthPoint => {
        const acc = sums[m]![li]!;
        const tuning = run.tuningFor(layer.name, cell.category);
        let slope = Number.NaN;
        if (tuning && tuning.length === acc.baseMeans.length) {
          const order = Array.from(tuning, (t, k) => ({ t, k })).sort((x, y) => y.t - x.t || x.k - y.k);
          const rank: number[] = [];
          const ratio: number[] = [];
          order.forEach(({ k }, r) => {
            if (acc.baseMeans[k]! > 0) {
              rank.push(order.length > 1 ? r / (order.length - 1) : 0);
              ratio.push(acc.modMeans[k]! / acc.baseMeans[k]!);
            }
          });
          if (rank.length >= 2) slope = linearFit(rank, ratio).slope;
        }
        return { layer: layer.name, depth: layer.depth, belowSite: (weightDepthOf.get(layer.name) ?? 0) - (weightDepthOf.get(site) ?? 0), relativeChange: acc.aa > 0 ? Math.sqrt(acc.dd / acc.aa) : acc.dd > 0 ? Infinity : 0, signatureSlope: slope };
      });
    }
    return result;
  });
}

function detection(s: ScoreDetection, auc: number, degenerate: boolean): SweepDetection {
  return { hitRate: s.hitRate, falseAlarmRate: s.falseAlarmRate, dPrime: degenerate ? Number.NaN : s.dPrime, criterion: degenerate ? Number.NaN : s.criterion, accuracy: s.accuracy, auc };
}
