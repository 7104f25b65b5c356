/**
 * `senseSites`: causal gain sensitivities of a site's channels for a readout, measured through the
 * injected gain input (y = x·G + B at the site, see src/graph/inject.ts) by finite differences:
 *
 *   gain kind:   m_kc = ∂ȳ_c/∂g_k at g = 1,   D(h) = (ȳ_c(G_k = 1+h) − ȳ_c(G_k = 1−h)) / 2h
 *   offset kind: o_kc = ∂ȳ_c/∂b_k at b = 0,   D(h) = (ȳ_c(B_k = +h) − ȳ_c(B_k = −h)) / 2h
 *
 * with every other channel at identity and ȳ_c the readout unit c averaged over the stimuli (all, those
 * containing one category, or for each category those containing it).
 *
 * Method (`method`):
 * - `richardson` (default): Richardson extrapolation of the central differences at h and h/2,
 *   R = (4·D(h/2) − D(h)) / 3. For a smooth readout D(h) = y' + h²·y'''/6 + O(h⁴), so the h² terms
 *   cancel and R = y' + O(h⁴) (Richardson extrapolation; e.g. Burden & Faires, Numerical Analysis,
 *   section 4.2, from memory). Four perturbed runs per channel and stimulus: ±h and ±h/2.
 * - `secant`: the plain central secant D(h), O(h²); two runs per channel and stimulus.
 * Neither is exact on a network of ReLU (or ReLU6) units: a step that crosses a unit's kink, where the
 * derivative jumps, moves both secants by an amount of order h that extrapolation does not remove (it
 * shrinks only with the step). On the PyTorch reference networks (tests/reference/README.md) the
 * secant at h = 0.01 differs from autograd by up to 4% of a category's largest value (24% at the
 * SqueezeNet site); a smaller step crosses fewer kinks, while in float32 a much smaller one drowns in
 * rounding (~ ε/h; DOMAIN.md). Richardson at the default h = 0.002 comes within about 1e-2 there.
 *
 * `fd_error` is the curvature the step sees within ±h: |D₊ − D₋| / 2 with the one-sided differences
 * D₊ = (ȳ(+h) − ȳ(0))/h and D₋ = (ȳ(0) − ȳ(−h))/h, ȳ(0) the unperturbed run (shared by all channels, so
 * free) — ≈ h·|y''|/2 for a smooth readout, large where the step crosses kinks. It is not an error
 * bound: a quadratic readout has a large fd_error and an exact central secant. With Richardson each
 * block also carries `extrapolationShift` = |R − D(h/2)| = |D(h/2) − D(h)| / 3, how far the
 * extrapolation moved the h/2 secant (the usual estimate of D(h/2)'s truncation error when the readout
 * is smooth; kinks within the step make it large). A site gets a one-line warning where the method's
 * indicator — extrapolationShift for Richardson, fd_error for the secant — exceeds `warnRatio`
 * (default 5%) of its category's largest |sensitivity| for some channel.
 *
 * Cost: only the part of the network downstream of the site runs, on batches of up to `rowsPerRun`
 * perturbed (stimulus, channel, step) rows, each row fed with the stimulus's recorded boundary tensors
 * (replicated). The boundary tensors come from a baseline snapshot (`from`, recorded at full float32
 * resolution) or from one unmodulated run of the whole instrumented network per stimulus batch. For the
 * gain kind, a channel that is exactly 0 everywhere at the site for a stimulus (a silent ReLU map) is not
 * perturbed: 0·(1 ± h) = 0, so its rows would repeat the unperturbed one bit for bit, and that row's
 * readout is used for them.
 */
import { RuntimeFailure, UsageError, closestHint } from '../errors.js';
import { exposeTensors } from '../graph/instrument.js';
import { injectModulations, modulationInputDims, modulationInputNames, type InjectionSite } from '../graph/inject.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { ACTIVATION_OPS } from '../graph/select.js';
import { readSidecar } from '../graph/sidecar.js';
import { extractTail, type TailGraph } from '../graph/tail.js';
import { createNetworkSession, type FloatTensor, type NetworkSession } from '../session/network-session.js';
import { openSnapshot, type LayerBatch, type Snapshot } from '../snapshot/snapshot.js';
import { writeSensitivityTable, type SensitivityTableBlock } from '../snapshot/tables.js';
import { listingDigest, openStimulusSource, type StimulusSource } from '../stimuli/source.js';
import type { Preprocessing } from '../stimuli/preprocess.js';
import { downstreamShare, estimateMacs } from './compute-share.js';
import { inspectModel, type LayerInfo, type ModelInspection } from './inspect-model.js';
import { assertSameModel, siteShapes } from './record-modulated.js';
import { shardRange, type ShardSpec } from './shard.js';
import { assertOutFileWritable } from './output-file.js';

/**
 * Default step h of a gain; with Richardson the runs are at ±h and ±h/2. Chosen on the PyTorch reference
 * networks (tests/reference/README.md): in float32, Richardson from 2e-3 and 1e-3 came closest to
 * autograd of the steps tried (1e-2 … 2.5e-4) — larger steps cross more ReLU kinks, smaller ones drown
 * in rounding.
 */
export const DEFAULT_STEP = 0.002;
/**
 * Default step h of an offset (added in activation units, not relative to the activation): measured on
 * the same networks with steps 2e-3, 5e-3, 1e-2 and 2e-2, 5e-3 was the one step within 1e-2 of autograd
 * on all four (at 2e-3 float32 rounding alone left 1.9e-2 on the SqueezeNet site).
 */
export const DEFAULT_OFFSET_STEP = 0.005;

/** The default step of a kind. */
export function defaultStep(kind: 'gain' | 'offset'): number {
  return kind === 'offset' ? DEFAULT_OFFSET_STEP : DEFAULT_STEP;
}
/** How a sensitivity is computed from the perturbed runs (see the file comment). */
export type SenseMethod = 'richardson' | 'secant';
/** The methods, the default first. */
export const SENSE_METHODS: readonly SenseMethod[] = ['richardson', 'secant'];
/** Default rows per downstream run. */
export const DEFAULT_ROWS_PER_RUN = 256;
/** Default cap on the feed memory of the two runs in flight (bytes). */
export const DEFAULT_FEED_BYTES = 256 * 2 ** 20;
/** Default warning threshold: fd_error above this fraction of the category's largest |sensitivity|. */
export const DEFAULT_WARN_RATIO = 0.05;
/** The `site` value that selects every default-recorded activation output with a channel axis. */
export const ALL_ACTIVATIONS = 'all-activations';

/** Options of `senseSites`. */
export interface SenseOptions {
  /** Path of the .onnx model (or a model already loaded). */
  model: string | LoadedModel;
  /** Stimuli (folder, CSV, `.npy`); optional with `from`, where they must list the same stimuli. */
  stimuli?: string;
  /** Labels CSV for `.npy` stimuli. */
  labels?: string;
  /** Baseline snapshot folder to feed the downstream part from. */
  from?: string;
  /** Site tensor name(s), or `all-activations`. */
  site: string | readonly string[];
  /** `OUTPUT[:CATEGORY|INDEX]`; default: the model's first graph output, every unit. */
  readout?: string;
  /** `gain` (default): derivative w.r.t. a multiplicative gain at 1; `offset`: w.r.t. an additive offset at 0. */
  kind?: 'gain' | 'offset';
  /** Step h > 0 (default DEFAULT_STEP for gains, DEFAULT_OFFSET_STEP for offsets); Richardson also runs at h/2. */
  step?: number;
  /** `richardson` (default): (4·D(h/2) − D(h))/3, four runs per channel; `secant`: D(h), two runs per channel. */
  method?: SenseMethod;
  /** Average only over stimuli containing this category, or `each`: every readout category over the stimuli containing it. */
  stimuliOf?: string;
  /** Perturbed rows per downstream run (default 256). */
  rowsPerRun?: number;
  /** Cap on feed bytes of the two runs in flight (default 256 MiB); lowers rowsPerRun for wide sites. */
  feedBytes?: number;
  /** Stimuli per run of the whole network when there is no baseline (default 16). */
  batch?: number;
  /** Runtime intra-op threads (0: the runtime chooses). */
  threads?: number;
  /** Full input shape for models with dynamic spatial axes. */
  inputShape?: number[];
  /** Preprocessing overrides (default: model sidecar, else mean 0, std 1). */
  mean?: number[];
  std?: number[];
  bgr?: boolean;
  /** Warning threshold (default 0.05). */
  warnRatio?: number;
  /** Write the sensitivity table here. */
  out?: string;
  /** Replace an existing file at `out` (without it an existing file is refused before any work). */
  force?: boolean;
  /**
   * Measure over shard K of N of the stimuli only (the split of src/pipeline/shard.ts): the result's
   * blocks carry `sums`, the partial statistics `sonde merge` combines; their sensitivities cover only
   * the shard and no warnings are raised.
   */
  shard?: ShardSpec;
  /** Called after every downstream run. */
  onProgress?: (progress: { site: string; rowsDone: number; rowsTotal: number }) => void;
}

/** The measured sensitivities of one site, with its cost. */
export interface SiteSensitivity extends SensitivityTableBlock {
  /** How `sensitivity` was computed. */
  method: SenseMethod;
  /** Richardson: |D(h/2) − D(h)| / 3, how far the extrapolation moved the h/2 secant, [C, K]; null for the secant. */
  extrapolationShift: Float64Array | null;
  /** The warning line, when the method's indicator (extrapolationShift, or fd_error for the secant) is large somewhere. */
  warning?: string;
  /** Largest indicator (extrapolationShift for Richardson, fd_error for the secant) / (largest |sensitivity| of its category) over channels and categories. */
  worstErrorRatio: number;
  /** Downstream runs and rows they held. */
  runs: number;
  rows: number;
  /** Perturbed rows not run (gain kind): channels exactly 0 at the site for a stimulus, whose rows would equal the unperturbed one. */
  skippedRows: number;
  /** Runs of the whole network (no baseline) and the stimuli they held. */
  prefixRuns: number;
  /** Seconds spent in downstream runs, in whole-network runs, and in all (wall). */
  tailSeconds: number;
  prefixSeconds: number;
  wallSeconds: number;
  /** Share of the network's MACs downstream of the site (Conv/Gemm/MatMul count). */
  downstreamShare: number;
  /**
   * Estimated cost in forward-pass equivalents per channel and stimulus, from the MAC count:
   * (rows · downstreamShare + stimuli run through the whole network) / (channels · stimuli used).
   * The perturbed runs alone need 4 · downstreamShare with Richardson, 2 · downstreamShare with the secant.
   */
  forwardEquivalentsPerChannel: number;
  /** Stimuli run through the whole network to compute boundary tensors (0 with a baseline). */
  prefixStimuli: number;
  /** Stimuli that entered at least one category's average. */
  stimuliUsed: number;
  /** With `shard`: the readout sums the averages are made of (see `sensitivityFromSums`). */
  sums?: SensitivitySums;
}

/** Readout sums of one site over some stimuli: what shards add up. */
export interface SensitivitySums {
  /** 2 (±h: secant) or 4 (±h, ±h/2: Richardson). */
  variants: number;
  /** Σ over stimuli of readout c with channel k perturbed by variant v, [V, C, K]: i = (v*C + k)*K + c. */
  perturbed: Float64Array;
  /** Σ of the unperturbed readout per category, [K]. */
  identity: Float64Array;
  /** Stimuli per category, [K]. */
  counts: Int32Array;
}

/** The readout a sensitivity refers to. */
export interface ReadoutChoice {
  /** Output tensor name. */
  tensor: string;
  /** Unit indices of the chosen categories. */
  units: number[];
  /** Category names (sidecar kinds, or unit index as text), one per unit. */
  categories: string[];
}

/** What `senseSites` returns. */
export interface SenseResult {
  sites: SiteSensitivity[];
  readout: ReadoutChoice;
  /** Where the boundary tensors came from. */
  source: 'baseline' | 'network';
  warnings: string[];
  file?: { path: string; bytes: number; rows: number };
  /** Stimuli in the listing, and the local index range measured ([0, N) without a shard). */
  stimuli: number;
  range: [number, number];
  /** The metadata written into (or, for a shard, meant for) the sensitivity table. */
  metadata: Record<string, string>;
}

/**
 * Measures gain (or offset) sensitivities of every channel of each site for each readout category.
 * @param options model, stimuli/from, site, readout, kind, step, stimuliOf and run settings.
 * @returns one block per site (sensitivity, fd_error, counts, cost) and the file written.
 * @throws UsageError for a step that is not a positive finite number, a site that is not found or has no
 *   channel axis, a readout that does not exist (or does not depend on the site, or is not one vector per
 *   stimulus), an unknown readout category, `stimuliOf` naming a category no stimulus carries (or without
 *   labels), a baseline of another model or without the boundary tensors at float32, stimuli that differ
 *   from the baseline's, or a model with a fixed batch axis; RuntimeFailure for runtime or file failures.
 */
export async function senseSites(options: SenseOptions): Promise<SenseResult> {
  const kind = options.kind ?? 'gain';
  if (kind !== 'gain' && kind !== 'offset') throw new UsageError('E_SENSE_KIND', `--kind must be "gain" or "offset", got "${String(kind)}"`);
  const method = options.method ?? 'richardson';
  if (!SENSE_METHODS.includes(method)) throw new UsageError('E_SENSE_METHOD', `--method must be ${SENSE_METHODS.map((m) => `"${m}"`).join(' or ')}, got "${String(method)}"`);
  const step = options.step ?? defaultStep(kind);
  if (!Number.isFinite(step) || step <= 0) {
    throw new UsageError('E_SENSE_STEP', `--step ${step} is not a positive number`, { hint: `use a step between 1e-3 and 1e-2 for float32 networks (default ${defaultStep(kind)} for --kind ${kind})` });
  }
  if (kind === 'gain' && step >= 1) throw new UsageError('E_SENSE_STEP', `--step ${step} would drive a gain to ${1 - step} or below; use a step below 1 (default ${DEFAULT_STEP})`);
  const rowsPerRun = options.rowsPerRun ?? DEFAULT_ROWS_PER_RUN;
  if (!Number.isSafeInteger(rowsPerRun) || rowsPerRun < 1) throw new UsageError('E_SENSE_ROWS', `rowsPerRun must be a positive integer, got ${rowsPerRun}`);
  const warnRatio = options.warnRatio ?? DEFAULT_WARN_RATIO;
  if (options.shard && options.out !== undefined) throw new UsageError('E_SENSE_SHARD', 'a shard measures part of the stimuli: write its partial statistics and merge them instead of writing a table');
  const model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
  if (options.out !== undefined) {
    const inputs = [{ option: 'MODEL', path: model.path }, { option: '--stimuli', path: options.stimuli }, { option: '--labels', path: options.labels }, { option: '--from', path: options.from }];
    assertOutFileWritable(options.out, { force: options.force ?? false, inputs });
  }
  if (typeof model.input.dims[0] === 'number') {
    throw new UsageError('E_SENSE_BATCH', `model ${model.fileName} has a fixed batch axis (${model.input.dims[0]}); sense batches many perturbed copies of a stimulus and needs a free batch axis`, {
      hint: 're-export the model with a dynamic batch dimension',
    });
  }
  if (options.stimuli === undefined && options.from === undefined) throw new UsageError('E_SENSE_STIMULI', 'sense needs --stimuli or --from (a baseline snapshot)');
  const baseline = options.from !== undefined ? openSnapshot(options.from) : null;
  if (baseline) assertSameModel(baseline, model, options.from!);
  const inspection = await inspectModel(model, options.inputShape ? { inputShape: options.inputShape } : {});
  const byName = new Map(inspection.layers.map((l) => [l.name, l]));
  const readout = parseReadout(options.readout, model, inspection);
  const sites = chooseSites(options.site, inspection, readout.tensor);

  let source: StimulusSource | null = null;
  if (options.stimuli !== undefined) {
    source = openSource(options, model, inspection, baseline);
    if (baseline && listingDigest(source) !== baseline.manifest.stimuli.listingDigest) {
      throw new UsageError('E_PAIRING', `--stimuli ${options.stimuli} lists other stimuli (or labels) than --from ${options.from} (${source.count} vs ${baseline.manifest.stimuli.count})`);
    }
  }
  const labels = baseline ? baseline.stimuli.labels : source!.labels;
  const weights = stimulusWeights(labels, readout.categories, options.stimuliOf);
  const range: [number, number] = options.shard ? ((r) => [r.start, r.end] as [number, number])(shardRange(options.shard.index, options.shard.count, labels.length)) : [0, labels.length];
  if (options.shard) {
    // only the shard's stimuli enter the sums; the other rows of the weights are cleared
    const K = readout.categories.length;
    weights.counts.fill(0);
    for (let s = 0; s < labels.length; s++) {
      for (let c = 0; c < K; c++) {
        if (s < range[0] || s >= range[1]) weights.weights[s * K + c] = 0;
        else if (weights.weights[s * K + c]) weights.counts[c]++;
      }
    }
  }
  const estimate = estimateMacs(inspection);

  const blocks: SiteSensitivity[] = [];
  const warnings: string[] = [];
  for (const site of sites) {
    const tail = extractTail(model, inspection.structure, [site], [readout.tensor]);
    if (!tail || !tail.computed.has(readout.tensor)) {
      throw new UsageError('E_SENSE_READOUT', `--readout "${readout.tensor}" does not depend on --site "${site}" (it is not downstream of it)`, { hint: 'pick a site upstream of the readout' });
    }
    if (baseline) checkBaseline(baseline, tail, options.from!);
    const layer = byName.get(site)!;
    const block = await senseOneSite({ site, layer, tail, model, inspection, readout, weights, kind, step, method, rowsPerRun, feedBytes: options.feedBytes ?? DEFAULT_FEED_BYTES, threads: options.threads ?? 0, baseline, source, batch: options.batch ?? 16, byName, onProgress: options.onProgress, range, keepSums: options.shard !== undefined });
    block.downstreamShare = downstreamShare(estimate, tail.computed);
    block.forwardEquivalentsPerChannel = (block.rows * block.downstreamShare + block.prefixStimuli) / (block.channels * block.stimuliUsed);
    if (options.shard) {
      blocks.push(block);
      continue;
    }
    const check = errorCheck(block, warnRatio);
    block.worstErrorRatio = check.worst;
    if (check.warning) {
      block.warning = check.warning;
      warnings.push(check.warning);
    }
    blocks.push(block);
  }
  const metadata = {
    'sonde.model': `${model.fileName} sha256:${model.sha256}`,
    'sonde.readout': readout.tensor,
    'sonde.stimuli_of': options.stimuliOf ?? 'all',
    'sonde.method': method,
    'sonde.source': baseline ? `baseline ${baseline.folder}` : `stimuli ${options.stimuli}`,
  };
  const result: SenseResult = { sites: blocks, readout, source: baseline ? 'baseline' : 'network', warnings, stimuli: labels.length, range, metadata };
  if (options.out !== undefined) {
    result.file = { path: options.out, ...writeSensitivityTable(options.out, blocks, metadata) };
  }
  return result;
}

// ---------------------------------------------------------------------------------------------------
// Readout, sites, stimuli

/**
 * Parses `OUTPUT[:CATEGORY|INDEX]` against a model. A name that is itself a tensor wins over a split at
 * the last ':' (tensor names may contain colons).
 * @param text the option value; undefined means the first graph output, every unit.
 * @param model the model (its sidecar names the units of `outputs.name`).
 * @param inspection the inspected model (readout shapes).
 * @returns the tensor, unit indices and category names.
 * @throws UsageError when the tensor does not exist (closest names), is not one vector per stimulus, or
 *   the category / index is not one of its units.
 */
export function parseReadout(text: string | undefined, model: LoadedModel, inspection: ModelInspection): ReadoutChoice {
  const names = new Set(inspection.layers.map((l) => l.name));
  let tensor = text ?? model.outputs[0] ?? '';
  let unit: string | undefined;
  if (text !== undefined && !names.has(text) && text.includes(':')) {
    const at = text.lastIndexOf(':');
    tensor = text.slice(0, at);
    unit = text.slice(at + 1);
  }
  if (!names.has(tensor)) {
    const near = closestHint(tensor, [...model.outputs, ...names]);
    throw new UsageError('E_SENSE_READOUT', `--readout "${text ?? tensor}": tensor "${tensor}" does not exist in ${model.fileName} (outputs: ${model.outputs.join(', ')}${near ? `; ${near}` : ''})`);
  }
  const layer = inspection.layers.find((l) => l.name === tensor)!;
  const units = layer.elements;
  if (layer.shape.length === 0 || units !== layer.shape[0]) {
    throw new UsageError('E_SENSE_READOUT', `--readout "${tensor}" has shape [${layer.shape.join(', ')}] per stimulus; a readout must be one vector of units per stimulus`, { hint: 'pick the logits or another [N, K] output' });
  }
  const sidecar = readSidecar(model.path);
  const kinds = sidecar?.outputs && sidecar.outputs.name === tensor && sidecar.outputs.kinds.length === units ? sidecar.outputs.kinds.map(String) : null;
  const namesOfUnits = kinds ?? Array.from({ length: units }, (_, i) => String(i));
  if (unit === undefined) return { tensor, units: namesOfUnits.map((_, i) => i), categories: namesOfUnits };
  let index = namesOfUnits.indexOf(unit);
  if (index < 0 && /^\d+$/.test(unit) && Number(unit) < units) index = Number(unit);
  if (index < 0) {
    const near = closestHint(unit, namesOfUnits);
    throw new UsageError('E_SENSE_READOUT', `--readout "${text}": "${unit}" is not a unit of "${tensor}" (${units} units${kinds ? `: ${kinds.join(', ')}` : `, indices 0–${units - 1}`}${near ? `; ${near}` : ''})`);
  }
  return { tensor, units: [index], categories: [namesOfUnits[index]!] };
}

/**
 * The site tensors to measure: explicit names, or `all-activations` (every default-recorded
 * activation-function output with a channel axis that lies upstream of the readout).
 * @throws UsageError for an unknown name (closest names), a tensor without a channel axis, or when
 *   `all-activations` finds none.
 */
export function chooseSites(site: string | readonly string[], inspection: ModelInspection, readout: string): string[] {
  const shapes = siteShapes(inspection.layers);
  const list = typeof site === 'string' ? [site] : [...site];
  if (list.length === 1 && list[0] === ALL_ACTIVATIONS) {
    const found = inspection.layers.filter((l) => l.default && ACTIVATION_OPS.has(l.op) && shapes.has(l.name) && l.name !== readout && isUpstream(inspection, l.name, readout)).map((l) => l.name);
    if (found.length === 0) throw new UsageError('E_SENSE_SITE', `--site ${ALL_ACTIVATIONS}: ${inspection.model.fileName} has no activation output with a channel axis upstream of "${readout}"`);
    return found;
  }
  if (list.length === 0) throw new UsageError('E_SENSE_SITE', '--site names no tensor');
  for (const name of list) {
    if (shapes.has(name)) continue;
    const layer = inspection.layers.find((l) => l.name === name);
    if (layer) {
      throw new UsageError('E_SENSE_SITE', `--site "${name}" has no channel axis (shape [${layer.shape.join(', ')}] per stimulus); a site must be [N, C] or [N, C, H, W]`, { hint: 'pick a feature map or a vector layer' });
    }
    const near = closestHint(name, inspection.layers.map((l) => l.name));
    throw new UsageError('E_SENSE_SITE', `--site "${name}" not found (model has ${inspection.layers.length} recordable tensors${near ? `; ${near}` : ''})`);
  }
  return list;
}

function isUpstream(inspection: ModelInspection, site: string, readout: string): boolean {
  const seen = new Set<string>();
  const queue = [site];
  while (queue.length > 0) {
    const tensor = queue.pop()!;
    for (const consumer of inspection.structure.consumers.get(tensor) ?? []) {
      for (const out of inspection.structure.nodes[consumer]!.outputs) {
        if (out === readout) return true;
        if (!seen.has(out)) {
          seen.add(out);
          queue.push(out);
        }
      }
    }
  }
  return false;
}

/**
 * Averaging weights: w[s*K + c] = 1 when stimulus s enters category c's average.
 * @param labels per-stimulus label lists.
 * @param categories the readout categories.
 * @param stimuliOf undefined (every stimulus), a category, or `each`.
 * @returns the weights and the count per category.
 * @throws UsageError when labels are needed but absent, or a category has no stimuli.
 */
export function stimulusWeights(labels: readonly (readonly string[])[], categories: readonly string[], stimuliOf: string | undefined): { weights: Uint8Array; counts: Int32Array } {
  const N = labels.length;
  const K = categories.length;
  const weights = new Uint8Array(N * K);
  const counts = new Int32Array(K);
  const present = [...new Set(labels.flat())].sort();
  if (stimuliOf !== undefined && present.length === 0) {
    throw new UsageError('E_SENSE_STIMULI_OF', `--stimuli-of ${stimuliOf}: the stimuli carry no labels`, { hint: 'give labelled stimuli (class folders, a path,label CSV, or --labels for .npy)' });
  }
  if (stimuliOf !== undefined && stimuliOf !== 'each' && !present.includes(stimuliOf)) {
    const near = closestHint(stimuliOf, present);
    throw new UsageError('E_SENSE_STIMULI_OF', `--stimuli-of "${stimuliOf}": no stimulus carries this category (labels: ${present.join(', ')}${near ? `; ${near}` : ''})`);
  }
  for (let s = 0; s < N; s++) {
    const own = labels[s]!;
    for (let c = 0; c < K; c++) {
      const use = stimuliOf === undefined ? true : stimuliOf === 'each' ? own.includes(categories[c]!) : own.includes(stimuliOf);
      if (use) {
        weights[s * K + c] = 1;
        counts[c]++;
      }
    }
  }
  for (let c = 0; c < K; c++) {
    if (counts[c] === 0) {
      const near = closestHint(categories[c]!, present);
      throw new UsageError('E_SENSE_STIMULI_OF', `--stimuli-of each: readout category "${categories[c]}" has no stimuli containing it (labels: ${present.join(', ')}${near ? `; ${near}` : ''})`, {
        hint: 'the readout categories must be label names; pick one readout category with --readout OUTPUT:CATEGORY',
      });
    }
  }
  return { weights, counts };
}

function openSource(options: SenseOptions, model: LoadedModel, inspection: ModelInspection, baseline: Snapshot | null): StimulusSource {
  const shape = inspection.input.shape;
  if (shape.length !== 4) throw new UsageError('E_INPUT_SHAPE', `input "${model.input.name}" has shape [${shape.join(', ')}]; Sonde feeds NCHW image batches`);
  const channels = shape[1]!;
  const sidecar = readSidecar(model.path);
  const preprocessing: Preprocessing = baseline?.manifest.preprocessing ?? {
    size: [shape[2]!, shape[3]!],
    mean: options.mean ?? sidecar?.preprocessing?.mean ?? new Array<number>(channels).fill(0),
    std: options.std ?? sidecar?.preprocessing?.std ?? new Array<number>(channels).fill(1),
    bgr: options.bgr ?? sidecar?.preprocessing?.bgr ?? false,
  };
  for (const [key, list] of [['--mean', preprocessing.mean], ['--std', preprocessing.std]] as const) {
    if (list.length !== channels) throw new UsageError('E_PREPROCESS', `${key} has ${list.length} values but the model input has ${channels} channels`);
  }
  return openStimulusSource(options.stimuli!, { preprocessing, channels, ...(options.labels ? { labelsFile: options.labels } : {}) });
}

function checkBaseline(baseline: Snapshot, tail: TailGraph, from: string): void {
  for (const name of tail.boundary) {
    const entry = baseline.manifest.layers.find((l) => l.name === name);
    const why = !entry ? 'did not record it' : entry.keep !== 'full' ? 'kept only its channel means' : entry.dtype !== 'float32' ? `stored it as ${entry.dtype}` : null;
    if (why) {
      throw new UsageError('E_SENSE_BASELINE', `--from ${from}: the part downstream of the site reads "${name}", and the baseline ${why}`, {
        hint: 'record the baseline with --layers covering it, --keep full and --dtype float32, or drop --from',
      });
    }
  }
}

// ---------------------------------------------------------------------------------------------------
// The measurement

interface SiteRun {
  site: string;
  layer: LayerInfo;
  tail: TailGraph;
  model: LoadedModel;
  inspection: ModelInspection;
  readout: ReadoutChoice;
  weights: { weights: Uint8Array; counts: Int32Array };
  kind: 'gain' | 'offset';
  step: number;
  method: SenseMethod;
  rowsPerRun: number;
  feedBytes: number;
  threads: number;
  baseline: Snapshot | null;
  source: StimulusSource | null;
  batch: number;
  byName: Map<string, LayerInfo>;
  onProgress: SenseOptions['onProgress'];
  /** Local stimulus indices [start, end) to run (a shard; all by default). */
  range?: [number, number];
  /** Keep the readout sums on the block (shards). */
  keepSums?: boolean;
}

/** A stimulus's boundary tensors, as views into a batch's arrays. */
interface StimulusValues {
  index: number;
  /** One per boundary tensor: the stimulus's values. */
  values: Float32Array[];
}

/**
 * Variants of a perturbed row: 0 = +h, 1 = −h, 2 = +h/2, 3 = −h/2; −1 = unperturbed.
 * Row sums are accumulated per (variant, channel, category) in doubles; the means are linear in them.
 */
const VARIANT_SIGN = [1, -1, 0.5, -0.5] as const;

/** The feeds of one downstream run under construction. */
class RowBuffer {
  readonly boundary: Float32Array[];
  readonly gain: Float32Array;
  readonly offset: Float32Array;
  readonly stimulus: Int32Array;
  readonly channel: Int32Array;
  readonly variant: Int8Array;
  /** For an unperturbed row: the channels skipped for its stimulus (all zero at the site), else null. */
  readonly skipped: (Int32Array | null)[];
  rows = 0;

  constructor(readonly capacity: number, readonly perRow: readonly number[], readonly channels: number) {
    this.boundary = perRow.map((n) => new Float32Array(capacity * n));
    this.gain = new Float32Array(capacity * channels).fill(1);
    this.offset = new Float32Array(capacity * channels);
    this.stimulus = new Int32Array(capacity);
    this.channel = new Int32Array(capacity);
    this.variant = new Int8Array(capacity);
    this.skipped = new Array<Int32Array | null>(capacity).fill(null);
  }

  /** Restores identity in the perturbed entries and empties the buffer. */
  clear(): void {
    const C = this.channels;
    for (let r = 0; r < this.rows; r++) {
      const k = this.channel[r]!;
      if (k >= 0) {
        this.gain[r * C + k] = 1; // [R, C]: i = r*C + k
        this.offset[r * C + k] = 0;
      }
      this.skipped[r] = null;
    }
    this.rows = 0;
  }
}

async function senseOneSite(run: SiteRun): Promise<SiteSensitivity> {
  const started = performance.now();
  const { site, tail, layer, readout, weights, kind, step } = run;
  const C = layer.shape[0]!;
  const K = readout.categories.length;
  const Kout = run.byName.get(readout.tensor)!.elements;
  const boundary = tail.boundary;
  const boundaryShapes = boundary.map((name) => (name === run.model.input.name ? run.inspection.input.shape.slice(1) : run.byName.get(name)!.shape));
  const perRow = boundaryShapes.map((shape) => shape.reduce((a, b) => a * b, 1));
  const bytesPerRow = 4 * (perRow.reduce((a, b) => a + b, 0) + 2 * C);
  const capacity = Math.max(1, Math.min(run.rowsPerRun, Math.floor(run.feedBytes / (2 * bytesPerRow))));
  const variants = run.method === 'richardson' ? 4 : 2;
  const injection: InjectionSite = { site, shape: layer.shape, spatial: false };
  const inputNames = modulationInputNames(site);
  const sumPerturbed = new Float64Array(variants * C * K); // [V, C, K]: i = (v*C + k)*K + c
  const sumIdentity = new Float64Array(K);
  const N = weights.weights.length / K;
  let used = 0;
  for (let s = 0; s < N; s++) {
    for (let c = 0; c < K; c++) {
      if (weights.weights[s * K + c]) {
        used++;
        break;
      }
    }
  }
  const rowsTotal = used * (1 + variants * C);
  let rowsDone = 0;
  let runs = 0;
  let tailSeconds = 0;
  let prefixSeconds = 0;
  let prefixRuns = 0;
  let prefixStimuli = 0;
  let skippedRows = 0;
  const siteIndex = boundary.indexOf(site);
  const siteSpatial = perRow[siteIndex]! / C;

  const session = await createNetworkSession(exposeTensors(injectModulations(tail.model, [injection]), [readout.tensor]), { threads: run.threads, label: `${run.model.fileName} (downstream of ${site})` });
  const buffers = [new RowBuffer(capacity, perRow, C), new RowBuffer(capacity, perRow, C)];
  let current = 0;
  let pending: Promise<void> | null = null;

  const accumulate = (buffer: RowBuffer, y: Float32Array): void => {
    const units = readout.units;
    for (let r = 0; r < buffer.rows; r++) {
      const s = buffer.stimulus[r]!;
      const v = buffer.variant[r]!;
      const k = buffer.channel[r]!;
      const wBase = s * K;
      const yBase = r * Kout; // [R, Kout]: i = r*Kout + u
      if (v < 0) {
        for (let c = 0; c < K; c++) if (weights.weights[wBase + c]) sumIdentity[c] += y[yBase + units[c]!]!;
        // A channel that is exactly 0 at the site stays 0 under any gain: its perturbed rows equal this one.
        const skipped = buffer.skipped[r];
        if (skipped) {
          for (let j = 0; j < skipped.length; j++) {
            const kk = skipped[j]!;
            for (let vv = 0; vv < variants; vv++) {
              const base = (vv * C + kk) * K;
              for (let c = 0; c < K; c++) if (weights.weights[wBase + c]) sumPerturbed[base + c] += y[yBase + units[c]!]!;
            }
          }
        }
      } else {
        const base = (v * C + k) * K;
        for (let c = 0; c < K; c++) if (weights.weights[wBase + c]) sumPerturbed[base + c] += y[yBase + units[c]!]!;
      }
    }
  };

  const launch = async (buffer: RowBuffer): Promise<void> => {
    const rows = buffer.rows;
    const feeds: Record<string, FloatTensor> = {};
    boundary.forEach((name, i) => {
      const data = rows === buffer.capacity ? buffer.boundary[i]! : buffer.boundary[i]!.subarray(0, rows * perRow[i]!);
      feeds[name === site ? `${site}::raw` : name] = { data, dims: [rows, ...boundaryShapes[i]!] };
    });
    const dims = modulationInputDims(injection, rows);
    feeds[inputNames.gain] = { data: buffer.gain.subarray(0, rows * C), dims };
    feeds[inputNames.offset] = { data: buffer.offset.subarray(0, rows * C), dims };
    const t0 = performance.now();
    const outputs = await session.run(feeds, [readout.tensor]);
    tailSeconds += (performance.now() - t0) / 1000;
    const y = outputs[readout.tensor];
    if (!y || y.data.length !== rows * Kout) throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the downstream part of "${site}" returned ${y ? y.data.length : 0} readout values for ${rows} rows, expected ${rows * Kout}`);
    accumulate(buffer, y.data);
    buffer.clear();
    runs++;
    rowsDone += rows;
    run.onProgress?.({ site, rowsDone: rowsDone + skippedRows, rowsTotal });
  };

  const flush = async (): Promise<void> => {
    const buffer = buffers[current]!;
    if (buffer.rows === 0) return;
    if (pending) await pending;
    pending = launch(buffer);
    pending.catch(() => undefined); // surfaced when awaited
    current = 1 - current;
  };

  const addRow = async (stimulus: StimulusValues, k: number, v: number, skipped: Int32Array | null = null): Promise<void> => {
    let buffer = buffers[current]!;
    if (buffer.rows === buffer.capacity) {
      await flush(); // waits for the other buffer's run, so the buffer switched to is empty
      buffer = buffers[current]!;
    }
    const r = buffer.rows++;
    for (let i = 0; i < perRow.length; i++) buffer.boundary[i]!.set(stimulus.values[i]!, r * perRow[i]!);
    buffer.stimulus[r] = stimulus.index;
    buffer.channel[r] = k;
    buffer.variant[r] = v;
    buffer.skipped[r] = skipped;
    if (k >= 0) {
      const delta = VARIANT_SIGN[v]! * step;
      if (kind === 'gain') buffer.gain[r * C + k] = 1 + delta;
      else buffer.offset[r * C + k] = delta;
    }
  };

  const processStimulus = async (stimulus: StimulusValues): Promise<void> => {
    let needed = false;
    for (let c = 0; c < K; c++) if (weights.weights[stimulus.index * K + c]) needed = true;
    if (!needed) return;
    // Gain kind: a channel whose site values are all exactly 0 for this stimulus gives x·(1 ± h) = 0 =
    // x·1, so its perturbed runs would repeat the unperturbed one bit for bit; they are not run.
    let skipped: Int32Array | null = null;
    if (kind === 'gain') {
      const values = stimulus.values[siteIndex]!;
      const dead: number[] = [];
      for (let k = 0; k < C; k++) {
        let zero = true;
        for (let p = k * siteSpatial, end = p + siteSpatial; p < end; p++) {
          if (values[p] !== 0) {
            zero = false;
            break;
          }
        }
        if (zero) dead.push(k);
      }
      if (dead.length > 0) skipped = Int32Array.from(dead);
    }
    await addRow(stimulus, -1, -1, skipped);
    let next = 0;
    for (let k = 0; k < C; k++) {
      if (skipped && next < skipped.length && skipped[next] === k) {
        next++;
        skippedRows += variants;
        continue;
      }
      for (let v = 0; v < variants; v++) await addRow(stimulus, k, v);
    }
  };

  try {
    // Double buffering: while the runtime computes one buffer's rows, the other is filled.
    const stimuli = boundaryStream(run, boundary);
    for await (const batch of stimuli) {
      prefixSeconds += batch.prefixSeconds;
      prefixRuns += batch.prefixRuns;
      if (batch.prefixRuns > 0) prefixStimuli += batch.stimuli.length;
      for (const stimulus of batch.stimuli) await processStimulus(stimulus);
    }
    await flush();
    if (pending) await pending;
  } finally {
    await session.close();
  }

  const counts = weights.counts;
  const { sensitivity, fdError, extrapolationShift } = sensitivityFromSums({ variants, perturbed: sumPerturbed, identity: sumIdentity, counts }, C, K, step);
  return {
    layer: site,
    depth: layer.depth,
    op: layer.op,
    channels: C,
    categories: [...readout.categories],
    sensitivity,
    fdError,
    kind,
    step,
    method: run.method,
    extrapolationShift,
    count: Int32Array.from(counts),
    worstErrorRatio: 0,
    runs,
    rows: rowsDone,
    skippedRows,
    prefixRuns,
    tailSeconds,
    prefixSeconds,
    wallSeconds: (performance.now() - started) / 1000,
    downstreamShare: Number.NaN,
    forwardEquivalentsPerChannel: Number.NaN,
    prefixStimuli,
    stimuliUsed: used,
    ...(run.keepSums ? { sums: { variants, perturbed: sumPerturbed, identity: sumIdentity, counts: Int32Array.from(counts) } } : {}),
  };
}

/**
 * Sensitivities and their step indicators from readout sums (the formulas of the file comment). With 2
 * variants (secant): D(h) = (ȳ(+h) − ȳ(−h)) / 2h. With 4 (Richardson): (4·D(h/2) − D(h)) / 3 and
 * extrapolationShift |D(h/2) − D(h)| / 3. Both: fd_error |D₊ − D₋| / 2 at h (curvature within ±h).
 * @param sums readout sums and counts (from one run, or added up over shards); `variants` picks the method.
 * @param C channels; K categories; step h.
 * @returns [C, K] arrays (k*K + c), extrapolationShift null for 2 variants; a category with count 0 gives NaN.
 * @throws RuntimeFailure when `variants` is neither 2 nor 4.
 */
export function sensitivityFromSums(sums: SensitivitySums, C: number, K: number, step: number): { sensitivity: Float64Array; fdError: Float64Array; extrapolationShift: Float64Array | null } {
  const { variants, perturbed: sumPerturbed, identity: sumIdentity, counts } = sums;
  if (variants !== 2 && variants !== 4) throw new RuntimeFailure('E_SENSE_SUMS', `sensitivity sums have ${variants} step variants; expected 2 (secant) or 4 (Richardson)`);
  const sensitivity = new Float64Array(C * K);
  const fdError = new Float64Array(C * K);
  const extrapolationShift = variants === 4 ? new Float64Array(C * K) : null;
  for (let k = 0; k < C; k++) {
    for (let c = 0; c < K; c++) {
      const n = counts[c]!;
      const plus = sumPerturbed[(0 * C + k) * K + c]! / n;
      const minus = sumPerturbed[(1 * C + k) * K + c]! / n;
      const zero = sumIdentity[c]! / n;
      const central = (plus - minus) / (2 * step);
      const forward = (plus - zero) / step;
      const backward = (zero - minus) / step;
      fdError[k * K + c] = Math.abs(forward - backward) / 2;
      if (extrapolationShift) {
        const halfPlus = sumPerturbed[(2 * C + k) * K + c]! / n;
        const halfMinus = sumPerturbed[(3 * C + k) * K + c]! / n;
        const half = (halfPlus - halfMinus) / step; // (y(+h/2) − y(−h/2)) / (2 · h/2)
        sensitivity[k * K + c] = (4 * half - central) / 3;
        extrapolationShift[k * K + c] = Math.abs(half - central) / 3;
      } else {
        sensitivity[k * K + c] = central;
      }
    }
  }
  return { sensitivity, fdError, extrapolationShift };
}

interface BoundaryBatch {
  stimuli: StimulusValues[];
  prefixSeconds: number;
  prefixRuns: number;
}

/** Streams each stimulus's boundary tensors: from the baseline's layer files, or by running the network. */
async function* boundaryStream(run: SiteRun, boundary: readonly string[]): AsyncGenerator<BoundaryBatch> {
  const perRow = boundary.map((name) => (name === run.model.input.name ? run.inspection.input.shape.slice(1) : run.byName.get(name)!.shape).reduce((a, b) => a * b, 1));
  if (run.baseline) {
    const baseline = run.baseline;
    // stimulus indices are local (0-based within the snapshot, which may be a shard)
    const offset = baseline.firstIndex;
    const read = run.range ? { range: [offset + run.range[0], offset + run.range[1]] as [number, number] } : {};
    const streams = boundary.map((name) => baseline.readLayer(name, read));
    try {
      for (;;) {
        const parts = await Promise.all(streams.map((s) => s.next()));
        const first = parts[0]!.value as LayerBatch | undefined;
        if (!first) break;
        const batches = parts.map((part, i) => {
          const batch = part.value as LayerBatch | undefined;
          if (!batch || batch.rows !== first.rows || batch.index[0] !== first.index[0]) throw new RuntimeFailure('E_LAYER_READ', `baseline layer "${boundary[i]}" is not aligned with "${boundary[0]}" (batch structure differs)`);
          return batch;
        });
        const stimuli: StimulusValues[] = [];
        for (let r = 0; r < first.rows; r++) {
          stimuli.push({ index: first.index[r]! - offset, values: batches.map((b, i) => b.activation!.subarray(r * perRow[i]!, (r + 1) * perRow[i]!)) });
        }
        yield { stimuli, prefixSeconds: 0, prefixRuns: 0 };
      }
    } finally {
      await Promise.all(streams.map((s) => s.return(undefined)));
    }
    return;
  }
  const source = run.source!;
  const inputName = run.model.input.name;
  const fetched = boundary.filter((name) => name !== inputName);
  const session: NetworkSession = await createNetworkSession(exposeTensors(run.model, fetched), { threads: run.threads, label: run.model.fileName });
  try {
    const [c, h, w] = source.shape;
    const per = c * h * w;
    const [from, to] = run.range ?? [0, source.count];
    for (let first = from; first < to; first += run.batch) {
      const rows = Math.min(run.batch, to - first);
      const input = new Float32Array(rows * per);
      await source.read(first, rows, input);
      const t0 = performance.now();
      const outputs = await session.run({ [inputName]: { data: input, dims: [rows, c, h, w] } }, fetched);
      const seconds = (performance.now() - t0) / 1000;
      const arrays = boundary.map((name) => {
        if (name === inputName) return input;
        const tensor = outputs[name];
        if (!tensor) throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the runtime returned no value for "${name}"`);
        return tensor.data;
      });
      const stimuli: StimulusValues[] = [];
      for (let r = 0; r < rows; r++) stimuli.push({ index: first + r, values: arrays.map((a, i) => a.subarray(r * perRow[i]!, (r + 1) * perRow[i]!)) });
      yield { stimuli, prefixSeconds: seconds, prefixRuns: 1 };
    }
  } finally {
    await session.close();
  }
}

/**
 * Finds the worst step indicator relative to its category's largest |sensitivity| and words a warning
 * (exported for merged shards): extrapolationShift for Richardson blocks, fd_error for secant blocks.
 * @param block a measured block; ratio the warning threshold (fraction of the category maximum).
 * @returns the worst ratio (NaN counts as infinite) and the warning line when some value exceeds `ratio`.
 */
export function errorCheck(block: SiteSensitivity, ratio: number): { worst: number; warning?: string } {
  const { channels: C, categories } = block;
  const K = categories.length;
  const indicator = block.extrapolationShift ?? block.fdError;
  let worst = 0;
  let worstAt = -1;
  let over = 0;
  for (let c = 0; c < K; c++) {
    let largest = 0;
    for (let k = 0; k < C; k++) largest = Math.max(largest, Math.abs(block.sensitivity[k * K + c]!));
    for (let k = 0; k < C; k++) {
      const e = indicator[k * K + c]!;
      const relative = largest > 0 ? e / largest : e > 0 ? Number.POSITIVE_INFINITY : 0;
      if (!(relative <= ratio)) over++;
      if (!(relative <= worst)) {
        worst = relative;
        worstAt = k * K + c;
      }
    }
  }
  if (over === 0) return { worst };
  const k = Math.floor(worstAt / K);
  const c = worstAt % K;
  const pct = (x: number) => `${(100 * x).toPrecision(2)}%`;
  const where = `for ${over} of ${C * K} values (worst ${Number.isFinite(worst) ? pct(worst) : 'NaN'} at channel ${k}, category "${categories[c]}")`;
  const warning = block.extrapolationShift
    ? `site "${block.layer}": the secants at steps ${block.step} and ${block.step / 2} differ by more than ${pct(3 * ratio)} of the category's largest |sensitivity| ${where}; the value depends on the step (ReLU kinks within ±${block.step}); compare a smaller --step`
    : `site "${block.layer}": fd_error (curvature within ±${block.step}) exceeds ${pct(ratio)} of the category's largest |sensitivity| ${where}; the secant is the mean slope over the step (curvature or ReLU kinks); compare a smaller --step or the default --method richardson`;
  return { worst, warning };
}
