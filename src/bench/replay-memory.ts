/**
 * Peak memory of the replays — `record --modulate --from` (tail replay, at a recorded site and at a
 * site the baseline did not record), `sweep` and `sense` (exact) — against bare inference of the same
 * model at the same batch, each in a child process of its own (peak resident set from
 * VmHWM (`PEAK_RSS_KB` in fixtures.ts), the runtime's worker thread included). Every replay runs twice:
 * with the default run-bytes budget (batches split into runtime calls by bytes) and with the budget
 * lifted (calls as large as before the split: a whole baseline batch, × every gain vector of a pass
 * for the sweep, × every readout category for sense), at two stimulus counts.
 *
 * Default: the residual reference model (64 px). SONDE_BENCH_MEMORY_MODEL=/path/model.onnx runs it on
 * another model (its sidecar gives the categories; e.g. a seeded torchvision VGG16 at 224 px), and
 * SONDE_BENCH_MEMORY_COUNTS=16,48 sets the stimulus counts (the sweep and sense use the first).
 */
import { copyFileSync, mkdirSync, symlinkSync, writeFileSync } from 'node:fs';
import { basename, join } from 'node:path';
import { loadModel } from '../graph/load-model.js';
import { readSidecar } from '../graph/sidecar.js';
import { ACTIVATION_OPS } from '../graph/select.js';
import { inspectModel } from '../record/inspect-model.js';
import { recordSnapshot } from '../record/record-snapshot.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { benchStimuli, REFERENCE_FIXTURES, runInChild, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const THREADS = 2;
const BATCH = 16;
/** A budget no call reaches: the calls are as large as they were before batches were split by bytes. */
const UNSPLIT = 1e15;

/** Runs `body` (an async function body with `dist` = the compiled package folder URL) in a fresh Node process (`runInChild`): the body's seconds, peak RSS and what it returned. */
function child(body: string): { seconds: number; rssMb: number; detail: string } {
  const run = runInChild(body);
  return { seconds: run.bodySeconds, rssMb: run.peakRssMb, detail: run.detail };
}

const js = (value: unknown): string => JSON.stringify(value);

export async function benchReplayMemory(): Promise<BenchResult> {
  const work = scratch('sonde-bench-memory-');
  try {
    const given = process.env['SONDE_BENCH_MEMORY_MODEL'];
    const model = join(work.folder, given ? basename(given) : 'residual.onnx');
    if (given) {
      symlinkSync(given, model);
      const sidecar = given.replace(/\.onnx$/, '.json');
      symlinkSync(sidecar, model.replace(/\.onnx$/, '.json'));
    } else {
      copyFileSync(join(REFERENCE_FIXTURES, 'residual.onnx'), model);
      writeFileSync(model.replace(/\.onnx$/, '.json'), JSON.stringify({ outputs: { name: 'logits', kinds: Array.from({ length: 10 }, (_, i) => `glyph-${i}`), threshold: 0 } }));
    }
    const counts = (process.env['SONDE_BENCH_MEMORY_COUNTS'] ?? '64,256').split(',').map(Number);
    const loaded = loadModel(model);
    const inspection = await inspectModel(loaded);
    const size = inspection.input.shape[2]!;
    const kinds = readSidecar(model)!.outputs!.kinds;
    const cued = kinds.slice(0, 2);
    const stimuli = counts.map((count) => {
      const folder = join(work.folder, `stimuli-${count}`);
      mkdirSync(folder, { recursive: true });
      const { path } = benchStimuli(folder, count, size, 7);
      const labels = join(folder, 'labels.csv');
      writeFileSync(labels, `label\n${Array.from({ length: count }, (_, i) => cued[i % cued.length]).join('\n')}\n`);
      return { count, path, labels };
    });
    const bases = [];
    for (const s of stimuli) bases.push(await recordSnapshot({ model, stimuli: s.path, labels: s.labels, out: join(work.folder, `base-${s.count}`), batch: BATCH, threads: THREADS }));
    const recorded = openSnapshot(bases[0]!.folder).manifest.layers;
    const activations = recorded.filter((l) => ACTIVATION_OPS.has(l.op) && l.shape.length === 3).map((l) => l.name);
    const site = activations[Math.floor(activations.length / 3)]!;
    // a convolution output the default selection does not record, in the middle third of the network
    const names = new Set(recorded.map((l) => l.name));
    const convs = inspection.layers.filter((l) => l.op === 'Conv' && !names.has(l.name));
    const unrecorded = convs[Math.floor(convs.length / 3)]!.name;
    const spec = (name: string, at: string) => {
      const path = join(work.folder, `${name}.json`);
      writeFileSync(path, JSON.stringify({ site: at, kind: 'uniform', gain: 1.2 }));
      return path;
    };
    const recordedSpec = spec('recorded', site);
    const unrecordedSpec = spec('unrecorded', unrecorded);
    const readout = kinds.length <= 16 ? 'logits' : `logits:${kinds[0]}`;

    const figures: Record<string, number> = {};
    const targets: Record<string, string> = {};
    const notes: string[] = [];
    let bare = 0;
    for (const s of stimuli) {
      const result = child(`const { readFileSync } = await import('node:fs');
const { createNetworkSession } = await import(dist + 'session/network-session.js');
const { parseNpy } = await import(dist + 'stimuli/npy.js');
const x = parseNpy(readFileSync(${js(s.path)}));
const per = x.data.length / x.shape[0];
const session = await createNetworkSession(readFileSync(${js(model)}), { threads: ${THREADS} });
for (let first = 0; first < x.shape[0]; first += ${BATCH}) {
  const rows = Math.min(${BATCH}, x.shape[0] - first);
  await session.run({ ${js(loaded.input.name)}: { data: x.data.slice(first * per, (first + rows) * per), dims: [rows, ...x.shape.slice(1)] } });
}
await session.close();`);
      figures[`bare inference, ${s.count} stimuli: peak RSS MB`] = result.rssMb;
      bare = Math.max(bare, result.rssMb);
    }
    const bound = 1.5 * bare + 512;
    figures['bound 1.5 × bare + 512 MB'] = bound;
    const measure = (label: string, body: string): void => {
      for (const [variant, runBytes] of [['split by bytes', undefined], ['unsplit', UNSPLIT]] as const) {
        const result = child(body.replaceAll('RUN_BYTES', runBytes === undefined ? 'undefined' : String(runBytes)));
        const key = `${label}, ${variant}: peak RSS MB`;
        figures[key] = result.rssMb;
        figures[`${label}, ${variant}: s`] = result.seconds;
        if (variant === 'split by bytes') targets[key] = `<= ${bound.toFixed(0)} (1.5 × bare + 512)`;
        if (result.detail) notes.push(`${label}, ${variant}: ${result.detail}`);
      }
    };
    for (const [i, s] of stimuli.entries()) {
      for (const [what, specPath] of [['recorded site', recordedSpec], ['unrecorded site', unrecordedSpec]] as const) {
        measure(`record --modulate --from, ${what}, ${s.count} stimuli`, `const { recordModulated } = await import(dist + 'record/record-modulated.js');
const r = await recordModulated({ model: ${js(model)}, stimuli: ${js(s.path)}, labels: ${js(s.labels)}, out: ${js(join(work.folder, `mod-${i}`))}, modulate: ${js(specPath)}, from: ${js(bases[i]!.folder)}, force: true, threads: ${THREADS}, runBytes: RUN_BYTES });
return r.manifest.run.mode + ' run, ' + (r.bytesWritten / 1e6).toFixed(1) + ' MB written';`);
      }
    }
    const first = stimuli[0]!;
    const strengths = Array.from({ length: 20 }, (_, k) => (k + 1) * 0.05);
    measure(`sweep, ${strengths.length * 2 * cued.length} cells (2 sites × ${cued.length} cued categories × ${strengths.length} strengths, uniform), ${first.count} stimuli`, `const { sweepModulations } = await import(dist + 'replay/sweep.js');
const r = await sweepModulations({ model: ${js(model)}, from: ${js(bases[0]!.folder)}, sites: ${js([site, activations[Math.floor((2 * activations.length) / 3)]!])}, schemes: ['uniform'], strengths: ${js(strengths)}, task: ${js(`detect:${cued.join(',')}`)}, out: ${js(join(work.folder, 'sweep'))}, restart: true, threads: ${THREADS}, runBytes: RUN_BYTES });
return r.cells.length + ' cells';`);
    measure(`sense (exact), readout ${readout}, site ${site}, ${first.count} stimuli`, `const { senseSites } = await import(dist + 'replay/sense.js');
const r = await senseSites({ model: ${js(model)}, from: ${js(bases[0]!.folder)}, site: ${js(site)}, readout: ${js(readout)}, threads: ${THREADS}, runBytes: RUN_BYTES });
const b = r.sites[0];
return b.categories.length + ' categories, ' + b.runs + ' gradient runs of ' + b.rows + ' rows in all';`);
    return {
      name: 'replay-memory',
      description: `peak RSS of the replays vs bare inference (${basename(model)}, ${size} px, batch ${BATCH}, ${THREADS} threads; each in a child process), default run bytes vs unsplit calls`,
      figures,
      targets,
      notes: [`site ${site}; unrecorded site ${unrecorded}`, ...notes],
    };
  } finally {
    work.dispose();
  }
}
