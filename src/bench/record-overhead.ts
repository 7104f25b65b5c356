import { closeSync, fsyncSync, mkdirSync, openSync, readFileSync, rmSync, writeSync } from 'node:fs';
import { join } from 'node:path';
import { exposeTensors } from '../graph/instrument.js';
import { tensorsFusedAway } from '../graph/fusions.js';
import { loadModel } from '../graph/load-model.js';
import { selectLayers } from '../graph/select.js';
import { inspectModel } from '../record/inspect-model.js';
import { recordSnapshot, type RecordOptions } from '../record/record-snapshot.js';
import { createNetworkSession, type NetworkSession } from '../session/network-session.js';
import { benchStimuli, median, REFERENCE_FIXTURES, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const THREADS = 2;

/**
 * The disk's write rate with fsync, as `dd bs=4M conv=fsync` measures it: `bytes` written in 4 MiB
 * chunks to a new file in `folder`, then fsync, then deleted. Bytes per second.
 */
export function fsyncWriteRate(folder: string, bytes = 512 * 2 ** 20): number {
  const path = join(folder, 'fsync-rate.bin');
  const chunk = new Uint8Array(4 * 2 ** 20).fill(7);
  const start = performance.now();
  const fd = openSync(path, 'w');
  try {
    for (let at = 0; at < bytes; at += chunk.length) writeSync(fd, chunk, 0, Math.min(chunk.length, bytes - at));
    fsyncSync(fd);
  } finally {
    closeSync(fd);
  }
  const seconds = (performance.now() - start) / 1000;
  rmSync(path, { force: true });
  return bytes / seconds;
}

/**
 * Record against the machine's floor, measured alternately in one process: wall time of `record` over
 * max(bare inference of the unmodified model on the same inputs, same batch and threads; bytes written ÷
 * the disk's fsync write rate measured in the same run), for the default layers and `--layers all`;
 * float16 (cast in the graph) over float32; what the writer thread and the in-graph cast gain (the same
 * record with writes on the main thread, with float16 converted in JavaScript); and what exposing the
 * recorded tensors costs the runtime itself (inference with the default layers exposed but not fetched,
 * and the tensors the optimised graph does not hold as they are — fused into another kernel or kept only
 * in the runtime's blocked layout).
 *
 * Default: the residual reference model, 1024 stimuli 3×64×64, batch 8. SONDE_BENCH_RECORD_MODEL (e.g.
 * a seeded torchvision VGG16 at 224 px), SONDE_BENCH_RECORD_STIMULI, SONDE_BENCH_RECORD_BATCH and
 * SONDE_BENCH_RECORD_REPEATS resize it.
 */
export async function benchRecordOverhead(): Promise<BenchResult> {
  const model = process.env['SONDE_BENCH_RECORD_MODEL'] || join(REFERENCE_FIXTURES, 'residual.onnx');
  const stimuliCount = Number(process.env['SONDE_BENCH_RECORD_STIMULI'] || 1024);
  const batch = Number(process.env['SONDE_BENCH_RECORD_BATCH'] || 8);
  const repeats = Number(process.env['SONDE_BENCH_RECORD_REPEATS'] || 3);
  const loaded = loadModel(model);
  const size = typeof loaded.input.dims[2] === 'number' ? loaded.input.dims[2] : 224;
  const work = scratch();
  const sessions: NetworkSession[] = [];
  try {
    const { path, data } = benchStimuli(work.folder, stimuliCount, size);
    mkdirSync(join(work.folder, 'one'));
    const one = benchStimuli(join(work.folder, 'one'), 1, size).path;
    const per = 3 * size * size;
    const inspection = await inspectModel(loaded, { inputShape: [1, 3, size, size] });
    const defaultNames = selectLayers(inspection.layers, 'default').map((l) => l.name);
    const bareSession = await createNetworkSession(readFileSync(model), { threads: THREADS });
    const exposedSession = await createNetworkSession(exposeTensors(loaded, defaultNames), { threads: THREADS });
    sessions.push(bareSession, exposedSession);
    const logits = loaded.proto.graph!.output![0]!.name!;
    const infer = async (session: NetworkSession): Promise<number> => {
      const start = performance.now();
      for (let first = 0; first < stimuliCount; first += batch) {
        const rows = Math.min(batch, stimuliCount - first);
        await session.run({ [loaded.input.name]: { data: data.slice(first * per, (first + rows) * per), dims: [rows, 3, size, size] } }, [logits]);
      }
      return (performance.now() - start) / 1000;
    };
    let out = 0;
    const record = async (options: Partial<RecordOptions>): Promise<{ seconds: number; bytes: number }> => {
      const start = performance.now();
      const summary = await recordSnapshot({ model, stimuli: path, out: join(work.folder, `snap${out++}`), layers: 'default', batch, threads: THREADS, ...options });
      const seconds = (performance.now() - start) / 1000;
      rmSync(summary.folder, { recursive: true, force: true }); // so the next run does not wait on this one's writeback
      return { seconds, bytes: summary.bytesWritten };
    };
    const variants: Record<string, Partial<RecordOptions>> = {
      default: {},
      all: { layers: 'all' },
      'default, writes on the main thread': { writeInBackground: false },
      'default, runtime threads spinning': { runtimeSpinning: true },
      'default float16': { dtype: 'float16' },
      'default float16 converted in JavaScript': { dtype: 'float16', float16InGraph: false },
    };
    await infer(bareSession); // warm-up
    await record({});
    const times: Record<string, number[]> = { bare: [], exposed: [], fsync: [], setup: [] };
    const bytes: Record<string, number> = {};
    for (let r = 0; r < repeats; r++) {
      times['fsync']!.push(fsyncWriteRate(work.folder));
      times['bare']!.push(await infer(bareSession));
      times['exposed']!.push(await infer(exposedSession));
      times['setup']!.push((await record({ stimuli: one })).seconds);
      for (const [name, options] of Object.entries(variants)) {
        const result = await record(options);
        (times[name] ??= []).push(result.seconds);
        bytes[name] = result.bytes;
      }
    }
    const fusedAway = await tensorsFusedAway(loaded, defaultNames);
    const bare = median(times['bare']!);
    const rate = median(times['fsync']!);
    const floor = (name: string) => Math.max(bare, bytes[name]! / rate);
    const t = (name: string) => median(times[name]!);
    return {
      name: 'record-overhead',
      description: `record vs the machine's floor, ${loaded.fileName}, ${stimuliCount} stimuli 3×${size}×${size}, batch ${batch}, ${THREADS} threads, median of ${repeats}`,
      figures: {
        'bare inference s': bare,
        'disk fsync write rate MB/s': rate / 1e6,
        'record default s': t('default'),
        'written default MB': bytes['default']! / 1e6,
        'floor default s': floor('default'),
        'ratio default to floor': t('default') / floor('default'),
        'ratio default to bare inference': t('default') / bare,
        'record setup (one stimulus) s': t('setup'),
        'ratio default to floor, setup excluded': (t('default') - t('setup')) / floor('default'),
        'record all s': t('all'),
        'written all MB': bytes['all']! / 1e6,
        'floor all s': floor('all'),
        'ratio all to floor': t('all') / floor('all'),
        'ratio all to floor, setup excluded': (t('all') - t('setup')) / floor('all'),
        'record default, writes on the main thread s': t('default, writes on the main thread'),
        'writer thread gain (main thread / writer thread)': t('default, writes on the main thread') / t('default'),
        'record default with spinning runtime threads s': t('default, runtime threads spinning'),
        'parking gain (spinning / parked)': t('default, runtime threads spinning') / t('default'),
        'record default float16 s': t('default float16'),
        'float16 / float32': t('default float16') / t('default'),
        'float16 converted in JavaScript / float32': t('default float16 converted in JavaScript') / t('default'),
        'inference with the default layers exposed, not fetched s': t('exposed'),
        'exposure cost (exposed / bare inference)': t('exposed') / bare,
        'default layers': defaultNames.length,
        'default layers the runtime fuses away or re-lays': fusedAway.length,
      },
      targets: { 'ratio default to floor': '<= 1.3', 'ratio all to floor': '<= 1.3', 'float16 / float32': '<= 0.6' },
      notes: [
        'floor = max(bare inference, bytes written ÷ fsync write rate); record time includes model loading and hashing, inspection (probe run), session creation, stimulus reading, channel means, Arrow encoding, SHA-256 and fsync; setup = a record of one stimulus (bare inference times runs only)',
        `fused away or re-laid (not held as they are in the optimised graph): ${[...new Set(fusedAway.map((n) => inspection.layers.find((l) => l.name === n)!.op))].join(', ') || 'none'}`,
      ],
    };
  } finally {
    for (const session of sessions) await session.close();
    work.dispose();
  }
}
