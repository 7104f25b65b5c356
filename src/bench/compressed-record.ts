import { readFileSync, rmSync } from 'node:fs';
import { join } from 'node:path';
import { loadModel } from '../graph/load-model.js';
import { recordSnapshot } from '../record/record-snapshot.js';
import type { LayerCompression } from '../snapshot/compression.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { benchStimuli, median, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

/** The demo network (trained, so its ReLU maps have a real network's sparsity). */
const DEMO_MODEL = new URL('../../models/demo/glyphnet.onnx', import.meta.url).pathname;

/**
 * Compressed snapshots: `record --layers op:Relu` with `--compress none`, `lz4` and `zstd`, alternated
 * in one process (median of the repeats), on the demo network or `SONDE_BENCH_COMPRESS_MODEL` (e.g. a
 * torchvision VGG16 at 224 px; `SONDE_BENCH_COMPRESS_STIMULI`, `…_BATCH`, `…_REPEATS` size the run).
 * Figures: layer-file bytes of each codec over the uncompressed float32 files, record speed of each
 * codec as a share of the uncompressed record's, and the read-back rate of a full pass over the
 * activations (decompression included; sizes only verified, so the hash does not dominate).
 */
export async function benchCompressedRecord(): Promise<BenchResult> {
  const model = process.env['SONDE_BENCH_COMPRESS_MODEL'] || DEMO_MODEL;
  const count = Number(process.env['SONDE_BENCH_COMPRESS_STIMULI'] || 512);
  const batch = Number(process.env['SONDE_BENCH_COMPRESS_BATCH'] || 8);
  const repeats = Number(process.env['SONDE_BENCH_COMPRESS_REPEATS'] || 3);
  const threads = 2;
  const loaded = loadModel(model);
  const size = Number(loaded.input.dims[2]) || 64;
  const work = scratch('sonde-bench-compress-');
  try {
    const { path } = benchStimuli(work.folder, count, size);
    const codecs: LayerCompression[] = ['none', 'lz4', 'zstd'];
    const seconds: Record<string, number[]> = { none: [], lz4: [], zstd: [] };
    const bytes: Record<string, number> = {};
    const readRate: Record<string, number> = {};
    let run = 0;
    const record = async (compress: LayerCompression, keep: boolean) => {
      const start = performance.now();
      const summary = await recordSnapshot({ model: loaded, stimuli: path, out: join(work.folder, `snap${run++}`), layers: 'op:Relu', batch, threads, compress });
      const elapsed = (performance.now() - start) / 1000;
      bytes[compress] = summary.manifest.layers.reduce((sum, l) => sum + (l.bytes ?? 0), 0);
      if (keep) readRate[compress] = await readBack(summary.folder);
      rmSync(summary.folder, { recursive: true, force: true }); // the next run does not wait on this one's writeback
      return elapsed;
    };
    await record('none', false); // warm-up: model load, page cache of the stimuli
    for (let r = 0; r < repeats; r++) for (const codec of codecs) seconds[codec]!.push(await record(codec, r === 0));
    const t = (codec: string) => median(seconds[codec]!);
    const modelName = model === DEMO_MODEL ? 'demo glyphnet' : model.split('/').pop()!;
    return {
      name: 'compressed-record',
      description: `record --layers op:Relu with --compress none / lz4 / zstd, ${modelName} at ${size} px, ${count} stimuli, batch ${batch}, ${threads} threads, median of ${repeats} (alternated)`,
      figures: {
        'uncompressed MB': bytes['none']! / 1e6,
        'lz4 bytes / float32 raw': bytes['lz4']! / bytes['none']!,
        'zstd bytes / float32 raw': bytes['zstd']! / bytes['none']!,
        'record none s': t('none'),
        'record lz4 s': t('lz4'),
        'record zstd s': t('zstd'),
        'lz4 speed / uncompressed': t('none') / t('lz4'),
        'zstd speed / uncompressed': t('none') / t('zstd'),
        'read none MB/s': readRate['none']!,
        'read lz4 MB/s': readRate['lz4']!,
        'read zstd MB/s': readRate['zstd']!,
      },
      targets: { 'lz4 bytes / float32 raw': '<= 0.6', 'zstd bytes / float32 raw': '<= 0.6', 'lz4 speed / uncompressed': '>= 0.8', 'zstd speed / uncompressed': '>= 0.8' },
      notes: [
        'bytes: the layer files only (the small channel-means files are the same for every codec); float32 raw = the uncompressed layer files',
        `codecs: LZ4 frame (lz4-napi ${packageVersion('lz4-napi')}), ZSTD level 1 (@toondepauw/node-zstd ${packageVersion('@toondepauw/node-zstd')}); compression runs on the main thread`,
        'read: one pass over every layer\'s activations in MB/s of float32 values handed out (page cache warm)',
      ],
    };
  } finally {
    work.dispose();
  }
}

/** MB/s of activation values handed out by one full read of every layer (size-only verification). */
async function readBack(folder: string): Promise<number> {
  const snap = openSnapshot(folder, { verify: 'size-only' });
  let values = 0;
  const start = performance.now();
  for (const entry of snap.manifest.layers) {
    for await (const b of snap.readLayer(entry.name, { reuse: true })) values += b.activation!.length;
  }
  return (values * 4) / 1e6 / ((performance.now() - start) / 1000);
}

function packageVersion(name: string): string {
  try {
    const url = new URL(`../../node_modules/${name}/package.json`, import.meta.url);
    return (JSON.parse(readFileSync(url, 'utf8')) as { version: string }).version;
  } catch {
    return '?';
  }
}
