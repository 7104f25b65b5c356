import { copyFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { ACTIVATION_OPS } from '../graph/select.js';
import { recordModulated } from '../record/record-modulated.js';
import { recordSnapshot } from '../record/record-snapshot.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { benchStimuli, REFERENCE_FIXTURES, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const STIMULI = 64;
const THREADS = 2;

/**
 * Tail replay vs full re-runs: one modulation (a uniform gain of 1.1) at every recorded activation site
 * of the residual reference model, recorded once replaying only the downstream part from the baseline
 * and once running the whole network; total wall time of each.
 */
export async function benchTailReplay(): Promise<BenchResult> {
  const work = scratch();
  try {
    const model = join(work.folder, 'residual.onnx');
    copyFileSync(join(REFERENCE_FIXTURES, 'residual.onnx'), model);
    const { path } = benchStimuli(work.folder, STIMULI, 64, 5);
    const base = await recordSnapshot({ model, stimuli: path, out: join(work.folder, 'base'), batch: 16, threads: THREADS });
    const sites = openSnapshot(base.folder).manifest.layers.filter((l) => ACTIVATION_OPS.has(l.op) && l.shape.length === 3).map((l) => l.name);
    let tailSeconds = 0;
    let fullSeconds = 0;
    let replayed = 0;
    for (const [i, site] of sites.entries()) {
      const spec = join(work.folder, `spec${i}.json`);
      writeFileSync(spec, JSON.stringify({ site, kind: 'uniform', gain: 1.1 }));
      // alternate the order so that neither variant always runs on a warmer cache
      const variants = i % 2 === 0 ? [false, true] : [true, false];
      for (const fullRun of variants) {
        const start = performance.now();
        const summary = await recordModulated({ model, stimuli: path, out: join(work.folder, fullRun ? 'full' : 'tail'), modulate: spec, from: base.folder, fullRun, force: true, threads: THREADS });
        const seconds = (performance.now() - start) / 1000;
        if (fullRun) fullSeconds += seconds;
        else {
          tailSeconds += seconds;
          if (summary.manifest.run.mode === 'tail') replayed++;
        }
      }
    }
    return {
      name: 'tail-replay',
      description: `one modulation at each of ${sites.length} recorded activation sites of the residual reference model, ${STIMULI} stimuli, ${THREADS} threads`,
      figures: { 'sites': sites.length, 'sites replayed from the baseline': replayed, 'tail replay total s': tailSeconds, 'full re-runs total s': fullSeconds, 'ratio tail/full': tailSeconds / fullSeconds },
      targets: { 'ratio tail/full': '<= 0.6' },
      notes: ['both variants write their snapshot to disk; tail replay writes only the layers downstream of the site and references the rest from the baseline'],
    };
  } finally {
    work.dispose();
  }
}
