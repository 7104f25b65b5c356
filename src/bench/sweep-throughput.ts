import { join } from 'node:path';
import { exposeTensors } from '../graph/instrument.js';
import { injectModulations, modulationInputNames } from '../graph/inject.js';
import { loadModel } from '../graph/load-model.js';
import { DEMO_MODEL } from '../demo/demo.js';
import { recordSnapshot } from '../record/record-snapshot.js';
import { sweepModulations } from '../replay/sweep.js';
import { tuneSnapshot } from '../compare/tune.js';
import { createNetworkSession } from '../session/network-session.js';
import { makeStimulusSet } from '../stimuli/demo/writer.js';
import { parseNpy } from '../stimuli/npy.js';
import { readFileSync } from 'node:fs';
import { scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const STIMULI = 256;
const THREADS = 2;
const BATCH = 16;

/**
 * Sweep throughput: modulated stimulus evaluations per second of `sweep` (downstream part only, 16
 * gain vectors per runtime call) against naive full re-runs of the modulated network one cell at a
 * time, on the demo network, the same cells (a late and an early site, uniform and tuning schemes).
 */
export async function benchSweepThroughput(): Promise<BenchResult> {
  const work = scratch();
  try {
    const model = loadModel(DEMO_MODEL);
    const stimuliFolder = join(work.folder, 'stimuli');
    await makeStimulusSet({ out: stimuliFolder, count: STIMULI, seed: 11, format: 'npy' });
    const stimuli = join(stimuliFolder, 'stimuli.npy');
    const base = await recordSnapshot({ model, stimuli, labels: join(stimuliFolder, 'labels.csv'), out: join(work.folder, 'base'), batch: BATCH, threads: THREADS });
    const tuning = join(work.folder, 'tuning.arrow');
    await tuneSnapshot({ snapshot: base.folder, out: tuning });
    const sidecarLayers = base.manifest.layers.filter((l) => l.op === 'Relu' && l.shape.length === 3).map((l) => l.name);
    const sites = [sidecarLayers[sidecarLayers.length - 1]!, sidecarLayers[Math.floor(sidecarLayers.length / 2)]!];
    const strengths = [0.2, 0.4, 0.6, 0.8];
    const start = performance.now();
    const result = await sweepModulations({ model, from: base.folder, sites, schemes: ['tuning', 'uniform'], strengths, task: 'detect:all', tuning, out: join(work.folder, 'sweep'), threads: THREADS, restart: true });
    const sweepSeconds = (performance.now() - start) / 1000;
    const evaluations = result.cells.length * STIMULI;

    // naive: the whole modulated network, one cell (one gain vector) at a time, over every batch
    const data = parseNpy(readFileSync(stimuli)).data as Float32Array;
    const per = 3 * 64 * 64;
    let naiveSeconds = 0;
    let naiveCells = 0;
    for (const site of sites) {
      const shape = base.manifest.layers.find((l) => l.name === site)!.shape;
      const session = await createNetworkSession(exposeTensors(injectModulations(model, [{ site, shape, spatial: false }]), []), { threads: THREADS });
      const names = modulationInputNames(site);
      const cells = result.cells.filter((c) => c.site === site).slice(0, 24); // a sample of cells: the naive path is slow
      const t0 = performance.now();
      for (const cell of cells) {
        const gain = new Float32Array(shape[0]!).fill(1 + cell.strength);
        for (let first = 0; first < STIMULI; first += BATCH) {
          const rows = Math.min(BATCH, STIMULI - first);
          const g = new Float32Array(rows * shape[0]!);
          for (let r = 0; r < rows; r++) g.set(gain, r * shape[0]!);
          const dims = [rows, shape[0]!, 1, 1];
          await session.run({ input: { data: data.subarray(first * per, (first + rows) * per), dims: [rows, 3, 64, 64] }, [names.gain]: { data: g, dims }, [names.offset]: { data: new Float32Array(rows * shape[0]!), dims } }, ['logits']);
        }
      }
      naiveSeconds += (performance.now() - t0) / 1000;
      naiveCells += cells.length;
      await session.close();
    }
    const naiveRate = (naiveCells * STIMULI) / naiveSeconds;
    const sweepRate = evaluations / sweepSeconds;
    return {
      name: 'sweep-throughput',
      description: `demo network, ${STIMULI} stimuli, ${result.cells.length} cells at 2 sites (${sites.join(', ')}), ${THREADS} threads`,
      figures: { 'sweep evaluations/s': sweepRate, 'naive full re-runs evaluations/s': naiveRate, 'speed-up': sweepRate / naiveRate, 'sweep s': sweepSeconds },
      notes: [`naive rate measured on ${naiveCells} of the cells; sweep time includes reading the baseline and writing results`],
    };
  } finally {
    work.dispose();
  }
}
