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
import { UsageError } from '../errors.js';
import { runBytesOption } from '../graph/run-memory.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { readSidecar } from '../graph/sidecar.js';
import type { TailGraph } from '../graph/tail.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { writeSensitivityTable } from '../snapshot/tables.js';
import { listingDigest, openStimulusSource, type StimulusSource } from '../stimuli/source.js';
import type { Preprocessing } from '../stimuli/preprocess.js';
import { downstreamShare, estimateMacs } from './compute-share.js';
import { inspectModel, type ModelInspection } from '../record/inspect-model.js';
import { assertSameModel } from '../record/record-modulated.js';
import { shardRange } from '../record/shard.js';
import { assertOutFileWritable } from '../outputs/output-file.js';
import { errorCheck } from './sense-estimate.js';
import { senseOneSite } from './sense-run.js';
import { senseOneSiteExact } from './sense-exact.js';
import { foldHeads, siteHeads } from './sense-heads.js';
import { chooseSites, parseReadout, siteTail, stimulusWeights, type ReadoutChoice } from './sense-plan.js';
import { mapReadout, type MappedReadout } from './mapped-readout.js';
import { mapTag } from '../graph/category-map.js';
import { READOUT_MAP_KEY } from '../snapshot/tables.js';
import { DEFAULT_FEED_BYTES, DEFAULT_ROWS_PER_RUN, DEFAULT_STEP, DEFAULT_WARN_RATIO, SENSE_METHODS, type SenseOptions, type SenseResult, type SiteSensitivity, defaultStep } from './sense-types.js';

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
  const method = options.method ?? 'exact';
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
  let model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
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
  let inspection = await inspectModel(model, options.inputShape ? { inputShape: options.inputShape } : {});
  let readout: ReadoutChoice;
  let mapped: MappedReadout | null = null;
  if (options.readoutMap) {
    // the map's category scores become the readout (appended as ONNX nodes; see mapped-readout.ts)
    mapped = await mapReadout(options.readout, model, inspection, options.readoutMap, options.inputShape);
    ({ model, inspection, readout } = mapped);
  } else readout = parseReadout(options.readout, model, inspection);
  const byName = new Map(inspection.layers.map((l) => [l.name, l]));
  const sites = chooseSites(options.site, inspection, readout.tensor);
  const headsOf = new Map(options.per === 'head' ? sites.map((site) => [site, siteHeads(inspection, site)] as const) : []);

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
    const tail = siteTail(inspection, site, readout.tensor);
    if (!tail || !tail.computed.has(readout.tensor)) {
      throw new UsageError('E_SENSE_READOUT', `--readout "${readout.tensor}" does not depend on --site "${site}" (it is not downstream of it)`, { hint: 'pick a site upstream of the readout' });
    }
    if (baseline) checkBaseline(baseline, tail, options.from!);
    const layer = byName.get(site)!;
    const measure = method === 'exact' ? senseOneSiteExact : senseOneSite;
    let block = await measure({ site, layer, tail, model, inspection, readout, weights, kind, step, method, rowsPerRun, feedBytes: options.feedBytes ?? DEFAULT_FEED_BYTES, runBytes: runBytesOption(options.runBytes), threads: options.threads ?? 0, baseline, source, batch: options.batch ?? 16, byName, onProgress: options.onProgress, range, keepSums: options.shard !== undefined });
    block.downstreamShare = downstreamShare(estimate, tail.computed);
    // exact: each row is one forward and one backward pass downstream (≈ 3 forward passes, common practice)
    block.forwardEquivalentsPerChannel = (block.rows * block.downstreamShare * (method === 'exact' ? 3 : 1) + block.prefixStimuli) / (block.channels * block.stimuliUsed);
    if (options.per === 'head') block = foldHeads(block, headsOf.get(site)!); // per head: the sum over its features (sense-heads.ts)
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
    'sonde.readout': mapped ? mapped.map.readout : readout.tensor,
    ...(mapped ? { [READOUT_MAP_KEY]: JSON.stringify(mapTag(mapped.map)) } : {}),
    'sonde.stimuli_of': options.stimuliOf ?? 'all',
    'sonde.method': method,
    ...(options.per === 'head' ? { 'sonde.per': 'head' } : {}),
    'sonde.source': baseline ? `baseline ${baseline.folder}` : `stimuli ${options.stimuli}`,
  };
  const result: SenseResult = { sites: blocks, readout, source: baseline ? 'baseline' : 'network', warnings, stimuli: labels.length, range, metadata };
  if (options.out !== undefined) {
    result.file = { path: options.out, ...writeSensitivityTable(options.out, blocks, metadata) };
  }
  return result;
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
