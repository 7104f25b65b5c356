/**
 * Peak memory of `record` against bare inference of the same model at the same batch, each in a child
 * process of its own (peak resident set, VmHWM (`PEAK_RSS_KB` in fixtures.ts): the runtime's worker
 * thread and the writer thread included), at two stimulus counts, for the default layers, `--layers all`
 * and float16; the bound is 1.5 × bare + 512 MB. Runtime calls are split by bytes (`--run-memory`,
 * default 512 MiB) and the writer thread's queue is bounded (128 MiB), so the peak should not grow with
 * the stimulus count.
 *
 * Default: the residual reference model (64 px), 256 and 1024 stimuli, batch 16.
 * SONDE_BENCH_RECORD_MEMORY_MODEL=/path/model.onnx (e.g. a torchvision VGG16 or ViT-B/16 at 224 px),
 * SONDE_BENCH_RECORD_MEMORY_COUNTS=16,48 and SONDE_BENCH_RECORD_MEMORY_BATCH resize it.
 */
import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { loadModel } from '../graph/load-model.js';
import { withSondeMalloc } from '../malloc-arenas.js';
import { benchStimuli, REFERENCE_FIXTURES, runInChild, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const THREADS = 2;

/** Peak RSS in MB of `body` run in a fresh Node.js process (`runInChild`) with the malloc settings `bin/sonde` gives every command. */
function peakRss(body: string): number {
  return runInChild(body, withSondeMalloc()).peakRssMb;
}

const js = (value: unknown): string => JSON.stringify(value);

export async function benchRecordMemory(): Promise<BenchResult> {
  const model = process.env['SONDE_BENCH_RECORD_MEMORY_MODEL'] || join(REFERENCE_FIXTURES, 'residual.onnx');
  const counts = (process.env['SONDE_BENCH_RECORD_MEMORY_COUNTS'] ?? '256,1024').split(',').map(Number);
  const batch = Number(process.env['SONDE_BENCH_RECORD_MEMORY_BATCH'] || 16);
  const loaded = loadModel(model);
  const size = typeof loaded.input.dims[2] === 'number' ? loaded.input.dims[2] : 224;
  const work = scratch('sonde-bench-record-memory-');
  try {
    const figures: Record<string, number> = {};
    const targets: Record<string, string> = {};
    const stimuli = counts.map((count) => {
      const folder = join(work.folder, `stimuli-${count}`);
      mkdirSync(folder, { recursive: true });
      return { count, path: benchStimuli(folder, count, size, 7).path };
    });
    let bare = 0;
    for (const s of stimuli) {
      const rss = peakRss(`const { readFileSync } = await import('node:fs');
const { createNetworkSession } = await import(dist + 'session/network-session.js');
const { parseNpy } = await import(dist + 'stimuli/npy.js');
const x = parseNpy(readFileSync(${js(s.path)}));
const per = x.data.length / x.shape[0];
const session = await createNetworkSession(readFileSync(${js(model)}), { threads: ${THREADS} });
for (let first = 0; first < x.shape[0]; first += ${batch}) {
  const rows = Math.min(${batch}, x.shape[0] - first);
  await session.run({ ${js(loaded.input.name)}: { data: x.data.slice(first * per, (first + rows) * per), dims: [rows, ...x.shape.slice(1)] } });
}
await session.close();`);
      figures[`bare inference, ${s.count} stimuli: peak RSS MB`] = rss;
      bare = Math.max(bare, rss);
    }
    const bound = 1.5 * bare + 512;
    figures['bound 1.5 × bare + 512 MB'] = bound;
    const variants: Array<[string, Record<string, unknown>]> = [['default layers', {}], ['--layers all', { layers: 'all' }], ['default layers float16', { dtype: 'float16' }]];
    let run = 0;
    for (const [label, extra] of variants) {
      for (const s of stimuli) {
        const out = join(work.folder, `snap${run++}`);
        const rss = peakRss(`const { recordSnapshot } = await import(dist + 'record/record-snapshot.js');
await recordSnapshot({ model: ${js(model)}, stimuli: ${js(s.path)}, out: ${js(out)}, batch: ${batch}, threads: ${THREADS}, ...${js(extra)} });
(await import('node:fs')).rmSync(${js(out)}, { recursive: true, force: true });`);
        const key = `record ${label}, ${s.count} stimuli: peak RSS MB`;
        figures[key] = rss;
        targets[key] = `<= ${bound.toFixed(0)}`;
      }
    }
    return {
      name: 'record-memory',
      description: `peak RSS of record vs bare inference, ${loaded.fileName} at ${size} px, batch ${batch}, ${THREADS} threads, stimulus counts ${counts.join(' and ')}`,
      figures,
      targets,
      notes: [`each figure from a fresh child process (its own peak RSS, VmHWM), with the malloc settings bin/sonde gives every command: GLIBC_TUNABLES=${withSondeMalloc()['GLIBC_TUNABLES']}`],
    };
  } finally {
    work.dispose();
  }
}
