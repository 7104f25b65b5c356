import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { exposeTensors } from '../graph/instrument.js';
import { injectModulations, modulationInputDims, modulationInputNames } from '../graph/inject.js';
import { loadModel } from '../graph/load-model.js';
import { extractTail } from '../graph/tail.js';
import { inspectModel } from '../record/inspect-model.js';
import { recordSnapshot } from '../record/record-snapshot.js';
import { senseSites } from '../replay/sense.js';
import { type SenseMethod } from '../replay/sense-types.js';
import { createNetworkSession, type FloatTensor } from '../session/network-session.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { benchStimuli, median, REFERENCE_FIXTURES, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const STIMULI = 32;
const THREADS = 2;
const ROWS = 256; // whole network and downstream part are both timed at the batch size sense uses
const REPEATS = 3;

/** The sites measured: a late and an early site of the residual reference model, and the bias-free VGG-style one (convolutions, ReLU, max pooling). */
const CASES = [
  { label: 'residual late', model: 'residual.onnx', site: '/features/features.16/conv/conv.1/conv.1.2/Clip_output_0' },
  { label: 'residual early', model: 'residual.onnx', site: '/features/features.6/conv/conv.0/conv.0.2/Clip_output_0' },
  { label: 'homogeneous', model: 'homogeneous.onnx', site: '/relu4/Relu_output_0' },
];

/**
 * Sensitivity cost: wall time of `sense` for every channel of one site, in forward-pass equivalents per
 * channel and stimulus — seconds / (channels × stimuli × seconds of one whole-network forward pass per
 * stimulus) — for finite differences (Richardson: runs at ±h and ±h/2, tail replay from a baseline),
 * with --method secant (runs at ±h only), and Richardson without a baseline (boundary tensors from
 * whole-network runs).
 *
 * Exact sensitivities (the default, gradients compiled into the graph) cost per stimulus for all channels
 * at once, so they are reported per category: seconds / (stimuli × categories × seconds of one forward
 * pass per stimulus), every readout unit (10) a category. Target ≤ 3 per category (one forward and one
 * backward pass of the downstream part per stimulus and category; a backward pass ≈ two forward passes,
 * common practice).
 *
 * Target: ≤ 4 × the share of the network's compute downstream of the site for Richardson (four perturbed
 * runs per channel and stimulus), ≤ 2 × for the secant (two). The share is measured by
 * timing: the downstream part alone (injected, identity gain) against the whole network, both on
 * 256-row batches with the same threads; the share of Conv/Gemm/MatMul multiply-adds is reported beside
 * it (the runtime computes small late feature maps less efficiently per multiply-add than large early
 * ones, so the two differ).
 */
export async function benchSensitivityCost(): Promise<BenchResult> {
  const work = scratch('sonde-bench-sense-');
  const figures: Record<string, number> = {};
  const targets: Record<string, string> = {};
  const notes: string[] = [];
  try {
    const { path } = benchStimuli(work.folder, STIMULI);
    mkdirSync(join(work.folder, 'timing'));
    const { data: timing } = benchStimuli(join(work.folder, 'timing'), ROWS, 64, 2);
    for (const c of CASES) {
      const modelPath = join(REFERENCE_FIXTURES, c.model);
      const model = loadModel(modelPath);
      const inspection = await inspectModel(model);
      const readout = model.outputs[0]!;
      const tail = extractTail(model, inspection.structure, [c.site], [readout])!;
      const baseline = join(work.folder, `base-${c.label.replace(/\s/g, '-')}`);
      await recordSnapshot({ model, stimuli: path, out: baseline, layerNames: tail.boundary, batch: STIMULI, threads: THREADS });

      // Whole network: seconds per stimulus at ROWS rows.
      const full = await createNetworkSession(exposeTensors(model, []), { threads: THREADS });
      const fullFeeds = { [model.input.name]: { data: timing, dims: [ROWS, 3, 64, 64] } };
      // Downstream part: seconds per row at ROWS rows, fed with the first stimulus's boundary tensors.
      const shapes = new Map(inspection.layers.map((l) => [l.name, l.shape]));
      const siteShape = shapes.get(c.site)!;
      const injection = { site: c.site, shape: siteShape, spatial: false };
      const part = await createNetworkSession(exposeTensors(injectModulations(tail.model, [injection]), [readout]), { threads: THREADS });
      const partFeeds: Record<string, FloatTensor> = {};
      const snap = openSnapshot(baseline);
      for (const name of tail.boundary) {
        const stream = snap.readLayer(name);
        const first = (await stream.next()).value!;
        await stream.return(undefined);
        const per = shapes.get(name)!.reduce((a, b) => a * b, 1);
        const data = new Float32Array(ROWS * per);
        for (let r = 0; r < ROWS; r++) data.set(first.activation!.subarray(0, per), r * per);
        partFeeds[name === c.site ? `${c.site}::raw` : name] = { data, dims: [ROWS, ...shapes.get(name)!] };
      }
      const names = modulationInputNames(c.site);
      const dims = modulationInputDims(injection, ROWS);
      partFeeds[names.gain] = { data: new Float32Array(ROWS * siteShape[0]!).fill(1), dims };
      partFeeds[names.offset] = { data: new Float32Array(ROWS * siteShape[0]!), dims };
      const time = async (run: () => Promise<unknown>): Promise<number> => {
        const start = performance.now();
        await run();
        return (performance.now() - start) / 1000 / ROWS;
      };
      await time(() => full.run(fullFeeds));
      await time(() => part.run(partFeeds, [readout]));
      // Rounds interleave the reference timings with the sense runs, so that a change of machine load
      // between them (the benchmark machine is shared) affects both sides of each ratio alike.
      const cost = async (perStimulus: number, options: { method?: SenseMethod; baseline: boolean }) => {
        const result = await senseSites({ model, site: c.site, threads: THREADS, ...(options.baseline ? { from: baseline } : { stimuli: path, batch: STIMULI }), ...(options.method ? { method: options.method } : {}) });
        const s = result.sites[0]!;
        return { s, equivalents: s.wallSeconds / (s.channels * s.stimuliUsed * perStimulus), perCategory: s.wallSeconds / (s.categories.length * s.stimuliUsed * perStimulus) };
      };
      const shares: number[] = [];
      const fullTimes: number[] = [];
      const plainCosts: number[] = [];
      const secantCosts: number[] = [];
      const networkCosts: number[] = [];
      const exactCosts: number[] = [];
      const exactNetworkCosts: number[] = [];
      let exact: Awaited<ReturnType<typeof cost>> | null = null;
      let plain: Awaited<ReturnType<typeof cost>> | null = null;
      for (let r = 0; r < REPEATS; r++) {
        const perStimulus = await time(() => full.run(fullFeeds));
        shares.push((await time(() => part.run(partFeeds, [readout]))) / perStimulus);
        fullTimes.push(perStimulus);
        plain = await cost(perStimulus, { baseline: true, method: 'richardson' });
        plainCosts.push(plain.equivalents);
        secantCosts.push((await cost(perStimulus, { baseline: true, method: 'secant' })).equivalents);
        networkCosts.push((await cost(perStimulus, { baseline: false, method: 'richardson' })).equivalents);
        exact = await cost(perStimulus, { baseline: true, method: 'exact' });
        exactCosts.push(exact.perCategory);
        exactNetworkCosts.push((await cost(perStimulus, { baseline: false, method: 'exact' })).perCategory);
      }
      await full.close();
      await part.close();
      const timedShare = median(shares);
      const perStimulus = median(fullTimes);
      const last = plain!.s;
      const prefix = `${c.label} (${last.channels} ch)`;
      figures[`${prefix} downstream share, timed`] = timedShare;
      figures[`${prefix} downstream share, MACs`] = last.downstreamShare;
      figures[`${prefix} exact, fwd-eq per stimulus and category, all channels`] = median(exactCosts);
      figures[`${prefix} exact, no baseline, fwd-eq per stimulus and category`] = median(exactNetworkCosts);
      figures[`${prefix} exact vs Richardson, speed-up for all channels`] = (median(plainCosts) * last.channels) / (median(exactCosts) * exact!.s.categories.length);
      figures[`${prefix} fwd-eq/channel, Richardson`] = median(plainCosts);
      figures[`${prefix} fwd-eq/channel, secant`] = median(secantCosts);
      figures[`${prefix} fwd-eq/channel, Richardson, no baseline`] = median(networkCosts);
      targets[`${prefix} exact, fwd-eq per stimulus and category, all channels`] = '<= 3 (one forward and one backward pass downstream)';
      targets[`${prefix} fwd-eq/channel, Richardson`] = `<= ${(4 * timedShare).toFixed(3)} (four runs per channel)`;
      targets[`${prefix} fwd-eq/channel, Richardson, no baseline`] = `<= ${(4 * timedShare).toFixed(3)} (four runs per channel)`;
      targets[`${prefix} fwd-eq/channel, secant`] = `<= ${(2 * timedShare).toFixed(3)} (two runs per channel)`;
      notes.push(`${c.label}: exact ${exact!.s.categories.length} categories, ${exact!.s.runs} gradient runs, ${exact!.s.wallSeconds.toFixed(3)} s`);
      notes.push(`${c.label}: ${last.rows} rows run, ${last.skippedRows} skipped (silent channels), ${last.runs} runs; sense ${last.wallSeconds.toFixed(3)} s, of it downstream runs ${last.tailSeconds.toFixed(3)} s; whole network ${(perStimulus * 1e3).toFixed(3)} ms per stimulus`);
    }
    notes.push(`${STIMULI} stimuli 3×64×64, ${THREADS} threads, ${ROWS}-row batches, medians of ${REPEATS} rounds; sense wall time per site includes creating the downstream session`);
    return { name: 'sensitivity-cost', description: 'sense for every channel of one site, in forward-pass equivalents per channel and stimulus', figures, targets, notes };
  } finally {
    work.dispose();
  }
}
