/**
 * One site's exact sensitivities (`--method exact`): the gradient graph of the part of the network
 * downstream of the site (src/graph/gradient/build.ts) runs forward and backward once per group of
 * stimuli, with one seed row per readout category, and returns every channel's (feature's) gain
 * sensitivity Σ (∂y_c/∂a)·a and offset sensitivity Σ ∂y_c/∂a per stimulus, summed over the site's
 * positions (a map's pixels, a token tensor's tokens); the averages over each category's
 * stimuli are the values `senseSites` reports. No step, no kinks inside a step: at a ReLU kink the
 * derivative is PyTorch's (ReLU′(0) = 0).
 */
import { RuntimeFailure, UsageError } from '../errors.js';
import { buildGradientGraph } from '../graph/gradient/build.js';
import { exposeForRuntime } from '../graph/instrument.js';
import type { LoadedModel } from '../graph/load-model.js';
import type { ModelInspection } from '../record/inspect-model.js';
import { createNetworkSession, type FloatTensor } from '../session/network-session.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { boundaryStream, siteGeometryOf, tensorElements, type SiteRun, type StimulusValues } from './sense-run.js';
import { DEFAULT_RUN_BYTES, evenRows, runRowBytes, rowsWithin } from '../graph/run-memory.js';
import { siteTail } from './sense-plan.js';
import type { SiteSensitivity } from './sense-types.js';

/** What one gradient run returns, for the stimuli it held. */
interface GradientRows {
  stimuli: StimulusValues[];
  /** [K·n, C]: row c·n + j is stimulus j's gain (or offset) sensitivities for category c. */
  values: Float32Array;
  /** [K·n, Kout]: the readout (rows c·n + j repeat rows j). */
  readout: Float32Array;
}

/** Counts and times of a stream of gradient runs. */
interface GradientStats {
  runs: number;
  rows: number;
  used: number;
  tailSeconds: number;
  prefixSeconds: number;
  prefixRuns: number;
  prefixStimuli: number;
}

/**
 * Streams the stimuli of `run` (those with a weight for some category) through the gradient graph in
 * groups of ⌊batch / K⌋ (at least one; fewer, down to one stimulus with the categories in chunks, where
 * a run would hold more than `run.runBytes`) and hands each group's rows, all K categories, to `visit`.
 */
async function streamGradients(run: SiteRun, visit: (rows: GradientRows) => void): Promise<GradientStats> {
  const { site, tail, layer, readout, weights, kind } = run;
  // features along the site's layout (channels of a map, D of tokens); the graph sums over the other axes
  const { features: C, featureAxis } = siteGeometryOf(layer);
  const K = readout.categories.length;
  const Kout = run.byName.get(readout.tensor)!.elements;
  const boundary = tail.boundary;
  const boundaryShapes = boundary.map((name) => (name === run.model.input.name ? run.inspection.input.shape.slice(1) : run.byName.get(name)!.shape));
  const perRow = boundaryShapes.map((shape) => shape.reduce((a, b) => a * b, 1));
  // Rows per run within runBytes (every forward tensor is kept for the backward pass): ⌊batch / K⌋
  // stimuli with all K categories, fewer stimuli where that exceeds the budget, and where even one
  // stimulus with K categories does, one stimulus with the categories in chunks of Kc per run.
  const rowBytes = runRowBytes(tail.model, (name) => tensorElements(run, name), { fed: boundary, fetched: [readout.tensor], backward: true });
  const Kc = evenRows(K, rowsWithin(run.runBytes, rowBytes, K));
  const most = Math.max(1, Math.floor(run.batch / K));
  const group = Kc < K ? 1 : evenRows(most, rowsWithin(run.runBytes, K * rowBytes, most));
  const graph = buildGradientGraph({ tail: tail.model, site, readout: readout.tensor, copies: Kc, probed: run.inspection.probed, modelName: run.model.fileName, featureAxis: featureAxis + 1 });
  const feedNames = boundary.map((name) => (Kc === 1 ? name : `${name}::once`));
  const output = kind === 'gain' ? graph.gain : graph.offset;
  const N = weights.weights.length / K;
  const stats: GradientStats = { runs: 0, rows: 0, used: 0, tailSeconds: 0, prefixSeconds: 0, prefixRuns: 0, prefixStimuli: 0 };
  const rowsTotal = (() => {
    let count = 0;
    const [from, to] = run.range ?? [0, N];
    for (let s = from; s < to; s++) {
      for (let c = 0; c < K; c++) {
        if (weights.weights[s * K + c]) {
          count++;
          break;
        }
      }
    }
    return count * K;
  })();
  const seeds = new Map<string, Float32Array>();
  /** Seed rows for categories [c0, c0 + Kc): [Kc·n, Kout], row c*n + j selects unit units[c0 + c] (none past K). */
  const seedFor = (n: number, c0: number): Float32Array => {
    let seed = seeds.get(`${n}:${c0}`);
    if (!seed) {
      seed = new Float32Array(Kc * n * Kout);
      for (let c = 0; c < Math.min(Kc, K - c0); c++) for (let j = 0; j < n; j++) seed[(c * n + j) * Kout + readout.units[c0 + c]!] = 1;
      if (seeds.size > 4) seeds.clear();
      seeds.set(`${n}:${c0}`, seed);
    }
    return seed;
  };

  const session = await createNetworkSession(exposeForRuntime(graph.model, []), { threads: run.threads, label: `${run.model.fileName} (gradient downstream of ${site})` });
  const runGroup = async (stimuli: StimulusValues[]): Promise<void> => {
    const n = stimuli.length;
    const feeds: Record<string, FloatTensor> = {};
    boundary.forEach((_, i) => {
      const data = new Float32Array(n * perRow[i]!);
      stimuli.forEach((stimulus, j) => data.set(stimulus.values[i]!, j * perRow[i]!));
      feeds[feedNames[i]!] = { data, dims: [n, ...boundaryShapes[i]!] };
    });
    // one run per chunk of categories; the chunks' rows are gathered into [K·n, C] and [K·n, Kout]
    const values = Kc === K ? null : new Float32Array(K * n * C);
    const y = Kc === K ? null : new Float32Array(K * n * Kout);
    for (let c0 = 0; c0 < K; c0 += Kc) {
      feeds[graph.seed] = { data: seedFor(n, c0), dims: [Kc * n, Kout] };
      const t0 = performance.now();
      const outputs = await session.run(feeds, [output, graph.readout]);
      stats.tailSeconds += (performance.now() - t0) / 1000;
      const v = outputs[output];
      const r = outputs[graph.readout];
      if (!v || v.data.length !== Kc * n * C || !r || r.data.length !== Kc * n * Kout) {
        throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the gradient graph of "${site}" returned ${v ? v.data.length : 0} values for ${Kc * n} rows of ${C} channels`);
      }
      stats.runs++;
      stats.rows += Math.min(Kc, K - c0) * n;
      if (!values || !y) {
        visit({ stimuli, values: v.data, readout: r.data });
        break;
      }
      const rows = Math.min(Kc, K - c0) * n; // rows c*n + j of the chunk are rows (c0 + c)*n + j of the whole
      values.set(v.data.subarray(0, rows * C), c0 * n * C);
      y.set(r.data.subarray(0, rows * Kout), c0 * n * Kout);
    }
    if (values && y) visit({ stimuli, values, readout: y });
    run.onProgress?.({ site, rowsDone: stats.rows, rowsTotal });
  };

  try {
    let pending: StimulusValues[] = [];
    for await (const batch of boundaryStream(run, boundary)) {
      stats.prefixSeconds += batch.prefixSeconds;
      stats.prefixRuns += batch.prefixRuns;
      if (batch.prefixRuns > 0) stats.prefixStimuli += batch.stimuli.length;
      for (const stimulus of batch.stimuli) {
        let needed = false;
        for (let c = 0; c < K; c++) if (weights.weights[stimulus.index * K + c]) needed = true;
        if (!needed) continue;
        stats.used++;
        pending.push(stimulus);
        if (pending.length === group) {
          await runGroup(pending);
          pending = [];
        }
      }
      // the batch's arrays are views; run what is left before the next batch replaces them
      if (pending.length > 0) {
        await runGroup(pending);
        pending = [];
      }
    }
  } finally {
    await session.close();
  }
  return stats;
}

/**
 * Measures one site exactly: `run.batch` rows per run (⌊batch / categories⌋ stimuli, at least one,
 * each repeated once per category).
 * @returns the site's block (kind as asked; `fdError` all 0, no extrapolation shift, step 0);
 *   `downstreamShare` and `forwardEquivalentsPerChannel` NaN (the caller knows the MAC counts).
 * @throws UsageError when an operator between site and readout has no gradient rule; RuntimeFailure
 *   when the runtime returns something unexpected.
 */
export async function senseOneSiteExact(run: SiteRun): Promise<SiteSensitivity> {
  const started = performance.now();
  const { site, layer, readout, weights, kind } = run;
  const C = siteGeometryOf(layer).features;
  const K = readout.categories.length;
  const sums = new Float64Array(C * K); // [C, K]: i = k*K + c
  const stats = await streamGradients(run, ({ stimuli, values }) => {
    const n = stimuli.length;
    for (let j = 0; j < n; j++) {
      const s = stimuli[j]!.index;
      for (let c = 0; c < K; c++) {
        if (!weights.weights[s * K + c]) continue;
        const base = (c * n + j) * C; // [K·n, C]: i = (c*n + j)*C + k
        for (let k = 0; k < C; k++) sums[k * K + c] += values[base + k]!;
      }
    }
  });
  const counts = weights.counts;
  const sensitivity = new Float64Array(C * K);
  for (let k = 0; k < C; k++) for (let c = 0; c < K; c++) sensitivity[k * K + c] = sums[k * K + c]! / counts[c]!;
  return {
    layer: site,
    depth: layer.depth,
    op: layer.op,
    channels: C,
    unit: siteGeometryOf(layer).unit,
    categories: [...readout.categories],
    sensitivity,
    fdError: new Float64Array(C * K),
    kind,
    step: 0,
    method: 'exact',
    extrapolationShift: null,
    count: Int32Array.from(counts),
    worstErrorRatio: 0,
    runs: stats.runs,
    rows: stats.rows,
    skippedRows: 0,
    prefixRuns: stats.prefixRuns,
    tailSeconds: stats.tailSeconds,
    prefixSeconds: stats.prefixSeconds,
    wallSeconds: (performance.now() - started) / 1000,
    downstreamShare: Number.NaN,
    forwardEquivalentsPerChannel: Number.NaN,
    prefixStimuli: stats.prefixStimuli,
    stimuliUsed: stats.used,
    ...(run.keepSums ? { sums: { variants: 1, perturbed: sums, identity: new Float64Array(K), counts: Int32Array.from(counts) } } : {}),
  };
}

/** Options of `exactGainJacobian`. */
export interface GainJacobianOptions {
  model: LoadedModel;
  inspection: ModelInspection;
  /** The baseline whose stimuli are used and whose recorded tensors feed the part downstream of the site. */
  baseline: Snapshot;
  site: string;
  /** The readout tensor and the units to differentiate. */
  readout: string;
  units: readonly number[];
  threads?: number;
  /** Rows (stimulus × unit) per gradient run (default 16). */
  batch?: number;
  /** Bytes of tensors one gradient run may hold (default `DEFAULT_RUN_BYTES`). */
  runBytes?: number;
}

/**
 * Per-stimulus gain derivatives of readout units: jacobian[u][i·C + k] = ∂y_u(i)/∂g_k at g = 1 for
 * stimulus i of the baseline and channel k of the site, and the readout itself, scores[i·Kout + u'] —
 * one gradient run per group of stimuli instead of C + 1 replays.
 * @throws UsageError when an operator between site and readout has no gradient rule (callers may fall
 *   back to finite differences), or the baseline cannot feed the part downstream of the site.
 */
export async function exactGainJacobian(options: GainJacobianOptions): Promise<{ scores: Float32Array; jacobian: Float64Array[]; channels: number; units: number }> {
  const { model, inspection, baseline, site } = options;
  const byName = new Map(inspection.layers.map((l) => [l.name, l]));
  const layer = byName.get(site);
  const out = byName.get(options.readout);
  if (!layer || !out) throw new UsageError('E_SITE', `"${!layer ? site : options.readout}" is not a recordable tensor of ${model.fileName}`);
  const tail = siteTail(inspection, site, options.readout);
  if (!tail || !tail.computed.has(options.readout)) throw new UsageError('E_SENSE_READOUT', `readout "${options.readout}" does not depend on site "${site}"`);
  const n = baseline.manifest.stimuli.count;
  const K = options.units.length;
  const C = siteGeometryOf(layer).features;
  const Kout = out.elements;
  const run: SiteRun = {
    site, layer, tail, model, inspection, byName,
    readout: { tensor: options.readout, units: [...options.units], categories: options.units.map(String) },
    weights: { weights: new Uint8Array(n * K).fill(1), counts: new Int32Array(K).fill(n) },
    kind: 'gain', step: 0, method: 'exact', rowsPerRun: 0, feedBytes: 0, runBytes: options.runBytes ?? DEFAULT_RUN_BYTES, threads: options.threads ?? 0,
    baseline, source: null, batch: options.batch ?? 16, onProgress: undefined,
  };
  const scores = new Float32Array(n * Kout);
  const jacobian = options.units.map(() => new Float64Array(n * C)); // per unit [n, C]: i*C + k
  await streamGradients(run, ({ stimuli, values, readout }) => {
    const rows = stimuli.length;
    for (let j = 0; j < rows; j++) {
      const i = stimuli[j]!.index;
      scores.set(readout.subarray(j * Kout, (j + 1) * Kout), i * Kout);
      for (let c = 0; c < K; c++) {
        const target = jacobian[c]!;
        const base = (c * rows + j) * C;
        for (let k = 0; k < C; k++) target[i * C + k] = values[base + k]!;
      }
    }
  });
  return { scores, jacobian, channels: C, units: Kout };
}
