/**
 * What glibc's malloc on transparent huge pages (GLIBC_TUNABLES=glibc.malloc.hugetlb=1, glibc ≥ 2.35;
 * a setting of the user's, not Sonde's default) does to a recording: the same record in fresh child processes, alternately with glibc.malloc.hugetlb=0
 * and =1 in GLIBC_TUNABLES — wall time of the whole process (Node.js start, model loading, set-up,
 * inference, writes), user and kernel CPU time, peak RSS — and bare inference of the same model both
 * ways, which should not move.
 *
 * Default: the residual reference model, 1024 stimuli 3×64×64, batch 8. SONDE_BENCH_RECORD_MODEL (e.g. a
 * seeded torchvision VGG16 at 224 px), SONDE_BENCH_RECORD_STIMULI, SONDE_BENCH_RECORD_BATCH and
 * SONDE_BENCH_RECORD_REPEATS resize it, as for record-overhead.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { benchStimuli, median, recordBenchSettings, runInChild, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const THREADS = 2;

/** `env` with glibc.malloc.hugetlb set to 1 (`on`) or 0, replacing any setting of it and keeping the other tunables. */
function withHugePageSetting(on: boolean, env: NodeJS.ProcessEnv = process.env): NodeJS.ProcessEnv {
  const kept = (env['GLIBC_TUNABLES'] ?? '').split(':').filter((entry) => entry !== '' && !entry.startsWith('glibc.malloc.hugetlb='));
  return { ...env, GLIBC_TUNABLES: [...kept, `glibc.malloc.hugetlb=${on ? 1 : 0}`].join(':') };
}

/** The kernel's transparent huge page mode (`always`, `madvise` or `never`), or null where it cannot be read. */
function transparentHugePageMode(): string | null {
  try {
    return /\[(\w+)\]/.exec(readFileSync('/sys/kernel/mm/transparent_hugepage/enabled', 'utf8'))?.[1] ?? null;
  } catch {
    return null;
  }
}

/** What one run measured, as the figures name it. */
interface Measured {
  seconds: number;
  user: number;
  system: number;
  rssMb: number;
}

/** Runs `body` in a fresh Node.js process with huge pages `on` or off (`runInChild`). */
function childRun(body: string, on: boolean): Measured {
  const run = runInChild(body, withHugePageSetting(on));
  return { seconds: run.wallSeconds, user: run.userSeconds, system: run.systemSeconds, rssMb: run.peakRssMb };
}

const js = (value: unknown): string => JSON.stringify(value);

export async function benchRecordHugePages(): Promise<BenchResult> {
  const { model, stimuliCount, batch, repeats, loaded, size } = recordBenchSettings();
  const work = scratch('sonde-bench-huge-pages-');
  try {
    const { path } = benchStimuli(work.folder, stimuliCount, size);
    const out = join(work.folder, 'snap');
    const record = `const { recordSnapshot } = await import(dist + 'record/record-snapshot.js');
await recordSnapshot({ model: ${js(model)}, stimuli: ${js(path)}, out: ${js(out)}, batch: ${batch}, threads: ${THREADS} });
(await import('node:fs')).rmSync(${js(out)}, { recursive: true, force: true });`;
    const bare = `const { readFileSync } = await import('node:fs');
const { createNetworkSession } = await import(dist + 'session/network-session.js');
const { parseNpy } = await import(dist + 'stimuli/npy.js');
const x = parseNpy(readFileSync(${js(path)}));
const per = x.data.length / x.shape[0];
const session = await createNetworkSession(readFileSync(${js(model)}), { threads: ${THREADS} });
for (let first = 0; first < x.shape[0]; first += ${batch}) {
  const rows = Math.min(${batch}, x.shape[0] - first);
  await session.run({ ${js(loaded.input.name)}: { data: x.data.slice(first * per, (first + rows) * per), dims: [rows, ...x.shape.slice(1)] } });
}
await session.close();`;
    childRun(record, true); // warm-up: the model and stimuli in the page cache
    const runs: Record<string, Measured[]> = { 'record 4 KiB': [], 'record huge': [], 'bare 4 KiB': [], 'bare huge': [] };
    for (let r = 0; r < repeats; r++) {
      // alternate which goes first, so neither always follows the other
      for (const on of r % 2 === 0 ? [false, true] : [true, false]) runs[`record ${on ? 'huge' : '4 KiB'}`]!.push(childRun(record, on));
      for (const on of r % 2 === 0 ? [false, true] : [true, false]) runs[`bare ${on ? 'huge' : '4 KiB'}`]!.push(childRun(bare, on));
    }
    const m = (name: string, key: keyof Measured) => median(runs[name]!.map((run) => run[key]));
    return {
      name: 'record-huge-pages',
      description: `record with malloc on 4 KiB vs transparent huge pages (glibc.malloc.hugetlb=0 / =1; kernel THP mode: ${transparentHugePageMode() ?? 'unknown'}), ${loaded.fileName}, ${stimuliCount} stimuli 3×${size}×${size}, batch ${batch}, ${THREADS} threads, each run a fresh process, median of ${repeats}`,
      figures: {
        'record, 4 KiB pages s': m('record 4 KiB', 'seconds'),
        'record, huge pages s': m('record huge', 'seconds'),
        'huge-page gain (4 KiB / huge)': m('record 4 KiB', 'seconds') / m('record huge', 'seconds'),
        'record kernel CPU, 4 KiB pages s': m('record 4 KiB', 'system'),
        'record kernel CPU, huge pages s': m('record huge', 'system'),
        'record user CPU, 4 KiB pages s': m('record 4 KiB', 'user'),
        'record user CPU, huge pages s': m('record huge', 'user'),
        'record peak RSS, 4 KiB pages MB': m('record 4 KiB', 'rssMb'),
        'record peak RSS, huge pages MB': m('record huge', 'rssMb'),
        'bare inference process, 4 KiB pages s': m('bare 4 KiB', 'seconds'),
        'bare inference process, huge pages s': m('bare huge', 'seconds'),
        'bare inference peak RSS, 4 KiB pages MB': m('bare 4 KiB', 'rssMb'),
        'bare inference peak RSS, huge pages MB': m('bare huge', 'rssMb'),
      },
      notes: [
        'times are whole child processes (Node.js start, imports, model loading included), so they run above record-overhead\'s in-process figures',
        'glibc < 2.35, other C libraries and THP mode "never" ignore the setting; Sonde leaves it to the user (README, Performance: it helps convolutional networks at 224 px and costs ViT-B/16 time and memory)',
      ],
    };
  } finally {
    work.dispose();
  }
}
