import { execFileSync } from 'node:child_process';
import { linkSync, mkdirSync, readFileSync, writeFileSync, copyFileSync } from 'node:fs';
import { join } from 'node:path';
import { recordSnapshot } from '../record/record-snapshot.js';
import { benchStimuli, median, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

/** The demo network (its default layers: the ReLU output of every stage, two pools, the logits). */
const DEMO_MODEL = new URL('../../models/demo/glyphnet.onnx', import.meta.url).pathname;

/**
 * Channel means without the activations: `tune` and the sweep's set-up (the baseline opened and the
 * channel means of the readout layer and of every site read — what `sweep` reads before its first
 * cell) on a full snapshot, side by side with the same on a channel-means snapshot (`--keep channels`)
 * of the same recording, and — for comparison — on the full snapshot read the format-2 way (its
 * manifest without the means files: the whole layer file is read and hashed). Each run is a child
 * process (a process remembers files it verified), the page cache warm, median of the repeats.
 * `SONDE_BENCH_MEANS_MODEL`, `…_STIMULI`, `…_BATCH` and `…_REPEATS` size the run.
 */
export async function benchMeansRead(): Promise<BenchResult> {
  const model = process.env['SONDE_BENCH_MEANS_MODEL'] || DEMO_MODEL;
  const count = Number(process.env['SONDE_BENCH_MEANS_STIMULI'] || 1024);
  const batch = Number(process.env['SONDE_BENCH_MEANS_BATCH'] || 16);
  const repeats = Number(process.env['SONDE_BENCH_MEANS_REPEATS'] || 3);
  const sizeEnv = process.env['SONDE_BENCH_MEANS_SIZE'];
  const work = scratch('sonde-bench-means-');
  try {
    const size = sizeEnv ? Number(sizeEnv) : model === DEMO_MODEL ? 64 : 224;
    const { path } = benchStimuli(work.folder, count, size);
    const kinds = ['disc', 'ring', 'cross', 'bar'];
    const labels = join(work.folder, 'labels.csv');
    writeFileSync(labels, `label\n${Array.from({ length: count }, (_, i) => kinds[i % kinds.length]).join('\n')}\n`);
    const full = join(work.folder, 'full');
    const channels = join(work.folder, 'channels');
    const common = { model, stimuli: path, labels, layers: 'default', batch, threads: 2 } as const;
    const recorded = await recordSnapshot({ ...common, out: full });
    await recordSnapshot({ ...common, out: channels, keep: 'channels' });
    // the same files read the format-2 way: hard links, a manifest without the means files
    const legacy = join(work.folder, 'legacy');
    mkdirSync(join(legacy, 'layers'), { recursive: true });
    const manifest = JSON.parse(readFileSync(join(full, 'manifest.json'), 'utf8')) as { format: number; layers: Array<{ file: string; means?: unknown }> };
    manifest.format = 2;
    for (const layer of manifest.layers) {
      linkSync(join(full, layer.file), join(legacy, layer.file));
      delete layer.means;
    }
    writeFileSync(join(legacy, 'manifest.json'), `${JSON.stringify(manifest, null, 2)}\n`);
    copyFileSync(join(full, 'stimuli.arrow'), join(legacy, 'stimuli.arrow'));
    const layerNames = recorded.manifest.layers.map((l) => l.name);
    const readout = layerNames[layerNames.length - 1]!;

    let outs = 0;
    const tune = (snapshot: string) => child(`const { runCli } = await import(${JSON.stringify(new URL('../cli/run.js', import.meta.url).href)});
const code = await runCli(['tune', ${JSON.stringify(snapshot)}, '--out', ${JSON.stringify(join(work.folder, `tuning-${outs++}.arrow`))}], { stdout: () => {}, stderr: (s) => process.stderr.write(s) });
if (code !== 0) throw new Error('tune exited ' + code);`);
    const setUp = (snapshot: string) => child(`const { openSnapshot } = await import(${JSON.stringify(new URL('../snapshot/snapshot.js', import.meta.url).href)});
const snap = openSnapshot(${JSON.stringify(snapshot)});
await snap.readChannelMeans(${JSON.stringify(readout)});
for (const site of ${JSON.stringify(layerNames)}) await snap.readChannelMeans(site);`);
    const folders = { full, channels, legacy };
    const times: Record<string, number[]> = {};
    for (const [name, folder] of Object.entries(folders)) {
      tune(folder); // warm the page cache
      times[`tune ${name}`] = [];
      times[`setup ${name}`] = [];
    }
    for (let r = 0; r < repeats; r++) {
      for (const [name, folder] of Object.entries(folders)) {
        times[`tune ${name}`]!.push(tune(folder));
        times[`setup ${name}`]!.push(setUp(folder));
      }
    }
    const t = (key: string) => median(times[key]!);
    const fullBytes = recorded.manifest.layers.reduce((sum, l) => sum + (l.bytes ?? 0), 0);
    const meansBytes = recorded.manifest.layers.reduce((sum, l) => sum + (l.means?.bytes ?? 0), 0);
    return {
      name: 'means-read',
      description: `tune and the sweep set-up on a full snapshot vs a channel-means snapshot of the same recording (default layers, ${model === DEMO_MODEL ? 'demo glyphnet' : model.split('/').pop()} at ${size} px, ${count} stimuli; child processes, page cache warm, median of ${repeats})`,
      figures: {
        'full layer files MB': fullBytes / 1e6,
        'means files MB': meansBytes / 1e6,
        'tune channel-means snapshot s': t('tune channels'),
        'tune full snapshot s': t('tune full'),
        'tune full / channel-means': t('tune full') / t('tune channels'),
        'sweep set-up channel-means snapshot s': t('setup channels'),
        'sweep set-up full snapshot s': t('setup full'),
        'sweep set-up full / channel-means': t('setup full') / t('setup channels'),
        'tune full, read the format-2 way s': t('tune legacy'),
        'tune format-2 way / channel-means': t('tune legacy') / t('tune channels'),
        'sweep set-up format-2 way / channel-means': t('setup legacy') / t('setup channels'),
      },
      targets: { 'tune full / channel-means': '<= 2', 'sweep set-up full / channel-means': '<= 2' },
      notes: ['each time includes starting Node and loading Sonde (the same for every snapshot); the format-2 way reads and hashes every layer file whole, as snapshots written before format 3 are read'],
    };
  } finally {
    work.dispose();
  }
}

/** Runs an ES module snippet in a child Node process; returns its wall time in seconds. */
function child(script: string): number {
  const start = performance.now();
  execFileSync(process.execPath, ['--input-type=module', '-e', script], { stdio: ['ignore', 'ignore', 'inherit'] });
  return (performance.now() - start) / 1000;
}
