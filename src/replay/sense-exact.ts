/**
 * One site's exact sensitivities (`--method exact`): the gradient graph of the part of the network
 * downstream of the site (src/graph/gradient/build.ts) runs forward and backward once per group of
 * stimuli, with one seed row per readout category, and returns every channel's gain sensitivity
 * Σ (∂y_c/∂a)·a and offset sensitivity Σ ∂y_c/∂a per stimulus; the averages over each category's
 * stimuli are the values `senseSites` reports. No step, no kinks inside a step: at a ReLU kink the
 * derivative is PyTorch's (ReLU′(0) = 0).
 */
import { RuntimeFailure } from '../errors.js';
import { buildGradientGraph } from '../graph/gradient/build.js';
import { exposeTensors } from '../graph/instrument.js';
import { createNetworkSession, type FloatTensor } from '../session/network-session.js';
import { boundaryStream, type SiteRun, type StimulusValues } from './sense-run.js';
import type { SiteSensitivity } from './sense-types.js';

/**
 * Measures one site exactly: `run.batch` rows per run (⌊batch / categories⌋ stimuli, at least one,
 * each repeated once per category).
 * @returns the site's block (kind as asked; `fdError` all 0, no extrapolation shift); `downstreamShare`
 *   and `forwardEquivalentsPerChannel` NaN (the caller knows the MAC counts).
 * @throws UsageError when an operator between site and readout has no gradient rule; RuntimeFailure
 *   when the runtime returns something unexpected.
 */
export async function senseOneSiteExact(run: SiteRun): Promise<SiteSensitivity> {
  const started = performance.now();
  const { site, tail, layer, readout, weights, kind } = run;
  const C = layer.shape[0]!;
  const K = readout.categories.length;
  const Kout = run.byName.get(readout.tensor)!.elements;
  const graph = buildGradientGraph({ tail: tail.model, site, readout: readout.tensor, copies: K, probed: run.inspection.probed, modelName: run.model.fileName });
  const boundary = tail.boundary;
  const boundaryShapes = boundary.map((name) => (name === run.model.input.name ? run.inspection.input.shape.slice(1) : run.byName.get(name)!.shape));
  const perRow = boundaryShapes.map((shape) => shape.reduce((a, b) => a * b, 1));
  const group = Math.max(1, Math.floor(run.batch / K));
  const feedNames = boundary.map((name) => (K === 1 ? name : `${name}::once`));
  const output = kind === 'gain' ? graph.gain : graph.offset;
  const sums = new Float64Array(C * K); // [C, K]: i = k*K + c
  const N = weights.weights.length / K;
  let used = 0;
  let rowsDone = 0;
  let runs = 0;
  let tailSeconds = 0;
  let prefixSeconds = 0;
  let prefixRuns = 0;
  let prefixStimuli = 0;
  const rowsTotal = (() => {
    let count = 0;
    const [from, to] = run.range ?? [0, N];
    for (let s = from; s < to; s++) for (let c = 0; c < K; c++) if (weights.weights[s * K + c]) { count++; break; }
    return count * K;
  })();
  const seeds = new Map<number, Float32Array>();
  const seedFor = (n: number): Float32Array => {
    let seed = seeds.get(n);
    if (!seed) {
      seed = new Float32Array(K * n * Kout); // [K·n, Kout]: row c*n + j selects unit units[c]
      for (let c = 0; c < K; c++) for (let j = 0; j < n; j++) seed[(c * n + j) * Kout + readout.units[c]!] = 1;
      seeds.set(n, seed);
    }
    return seed;
  };

  const session = await createNetworkSession(exposeTensors(graph.model, []), { threads: run.threads, label: `${run.model.fileName} (gradient downstream of ${site})` });
  const runGroup = async (stimuli: StimulusValues[]): Promise<void> => {
    const n = stimuli.length;
    const feeds: Record<string, FloatTensor> = {};
    boundary.forEach((_, i) => {
      const data = new Float32Array(n * perRow[i]!);
      stimuli.forEach((stimulus, j) => data.set(stimulus.values[i]!, j * perRow[i]!));
      feeds[feedNames[i]!] = { data, dims: [n, ...boundaryShapes[i]!] };
    });
    feeds[graph.seed] = { data: seedFor(n), dims: [K * n, Kout] };
    const t0 = performance.now();
    const outputs = await session.run(feeds, [output]);
    tailSeconds += (performance.now() - t0) / 1000;
    const values = outputs[output];
    if (!values || values.data.length !== K * n * C) throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the gradient graph of "${site}" returned ${values ? values.data.length : 0} values for ${K * n} rows of ${C} channels`);
    const m = values.data; // [K·n, C]: i = (c*n + j)*C + k
    for (let j = 0; j < n; j++) {
      const s = stimuli[j]!.index;
      for (let c = 0; c < K; c++) {
        if (!weights.weights[s * K + c]) continue;
        const base = (c * n + j) * C;
        for (let k = 0; k < C; k++) sums[k * K + c] += m[base + k]!;
      }
    }
    runs++;
    rowsDone += K * n;
    run.onProgress?.({ site, rowsDone, rowsTotal });
  };

  try {
    let pendingGroup: StimulusValues[] = [];
    for await (const batch of boundaryStream(run, boundary)) {
      prefixSeconds += batch.prefixSeconds;
      prefixRuns += batch.prefixRuns;
      if (batch.prefixRuns > 0) prefixStimuli += batch.stimuli.length;
      for (const stimulus of batch.stimuli) {
        let needed = false;
        for (let c = 0; c < K; c++) if (weights.weights[stimulus.index * K + c]) needed = true;
        if (!needed) continue;
        used++;
        pendingGroup.push(stimulus);
        if (pendingGroup.length === group) {
          await runGroup(pendingGroup);
          pendingGroup = [];
        }
      }
      // the batch's arrays are views; run what is left before the next batch replaces them
      if (pendingGroup.length > 0) {
        await runGroup(pendingGroup);
        pendingGroup = [];
      }
    }
  } finally {
    await session.close();
  }

  const counts = weights.counts;
  const sensitivity = new Float64Array(C * K);
  for (let k = 0; k < C; k++) for (let c = 0; c < K; c++) sensitivity[k * K + c] = sums[k * K + c]! / counts[c]!;
  return {
    layer: site,
    depth: layer.depth,
    op: layer.op,
    channels: C,
    categories: [...readout.categories],
    sensitivity,
    fdError: new Float64Array(C * K),
    kind,
    step: 0,
    method: 'exact',
    extrapolationShift: null,
    count: Int32Array.from(counts),
    worstErrorRatio: 0,
    runs,
    rows: rowsDone,
    skippedRows: 0,
    prefixRuns,
    tailSeconds,
    prefixSeconds,
    wallSeconds: (performance.now() - started) / 1000,
    downstreamShare: Number.NaN,
    forwardEquivalentsPerChannel: Number.NaN,
    prefixStimuli,
    stimuliUsed: used,
    ...(run.keepSums ? { sums: { variants: 1, perturbed: sums, identity: new Float64Array(K), counts: Int32Array.from(counts) } } : {}),
  };
}
