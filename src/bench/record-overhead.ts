import { closeSync, fsyncSync, openSync, readFileSync, rmSync, writeSync } from 'node:fs';
import { createHash } from 'node:crypto';
import { availableParallelism } from 'node:os';
import { join } from 'node:path';
import { setFlagsFromString } from 'node:v8';
import { runInNewContext } from 'node:vm';
import { exposeTensors } from '../graph/instrument.js';
import { tensorsFusedAway } from '../graph/fusions.js';
import { selectLayers } from '../graph/select.js';
import { wantsDirectWrites } from '../disk/write-mode.js';
import { inspectModel } from '../record/inspect-model.js';
import { recordSnapshot, type RecordOptions } from '../record/record-snapshot.js';
import { createNetworkSession, type NetworkSession } from '../session/network-session.js';
import { benchStimuli, median, recordBenchSettings, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const THREADS = 2;

/**
 * A write rate of this machine, bytes per second: `bytes` written in 4 MiB chunks to a new file in
 * `folder`, then deleted. With `fsync` the file is fsynced before the clock stops — the disk's rate, as
 * `dd bs=4M conv=fsync` measures it; without, the page cache's (the kernel's copy and page allocation,
 * what a recording's writes cost the CPU).
 */
function writeRate(folder: string, bytes: number, fsync: boolean): number {
  const path = join(folder, fsync ? 'fsync-rate.bin' : 'page-cache-rate.bin');
  const chunk = new Uint8Array(4 * 2 ** 20).fill(7);
  const start = performance.now();
  const fd = openSync(path, 'w');
  try {
    for (let at = 0; at < bytes; at += chunk.length) writeSync(fd, chunk, 0, Math.min(chunk.length, bytes - at));
    if (fsync) fsyncSync(fd);
  } finally {
    closeSync(fd);
  }
  const seconds = (performance.now() - start) / 1000;
  rmSync(path, { force: true });
  return bytes / seconds;
}

/** The disk's write rate with fsync (`writeRate`), bytes per second. */
export function fsyncWriteRate(folder: string, bytes = 512 * 2 ** 20): number {
  return writeRate(folder, bytes, true);
}

/** The page cache's write rate, no fsync (`writeRate`), bytes per second. */
export function pageCacheWriteRate(folder: string, bytes = 512 * 2 ** 20): number {
  return writeRate(folder, bytes, false);
}

/**
 * A full garbage collection now. V8's `gc` is exposed to a fresh context only, so that the flag needs
 * no `--expose-gc` on the command line (worker threads refuse that flag in their execArgv).
 */
function collectGarbage(): void {
  setFlagsFromString('--expose-gc');
  (runInNewContext('gc') as () => void)();
}

/** SHA-256 throughput of one core (node:crypto over 256 MiB in 4 MiB updates), bytes per second. */
export function sha256Rate(bytes = 256 * 2 ** 20): number {
  const chunk = new Uint8Array(4 * 2 ** 20).fill(11);
  const start = performance.now();
  const hash = createHash('sha256');
  for (let at = 0; at < bytes; at += chunk.length) hash.update(chunk);
  hash.digest();
  return bytes / ((performance.now() - start) / 1000);
}

/**
 * Record against the machine's floor, measured alternately in one process: wall time of `record` over
 * max(bare inference of the unmodified model on the same inputs, same batch and threads; bytes written ÷
 * the disk's fsync write rate measured in the same run), for the default layers and `--layers all`;
 * float16 (cast in the graph) over float32; what the writer thread and the in-graph cast gain (the same
 * record with writes on the main thread, with float16 converted in JavaScript); and what exposing the
 * recorded tensors costs the runtime itself (inference with the default layers exposed but not fetched,
 * and exposed and fetched — the runtime's share of any recording through it — and the tensors the
 * optimised graph does not hold as they are: fused into another kernel or kept only in the runtime's
 * blocked layout). Where the time goes: the CPU time (user and kernel, every thread) of a record and
 * of inference, against the cores, and this machine's SHA-256 and page-cache write rates.
 *
 * Default: the residual reference model, 1024 stimuli 3×64×64, batch 8. SONDE_BENCH_RECORD_MODEL (e.g.
 * a seeded torchvision VGG16 at 224 px), SONDE_BENCH_RECORD_STIMULI, SONDE_BENCH_RECORD_BATCH and
 * SONDE_BENCH_RECORD_REPEATS resize it.
 */
export async function benchRecordOverhead(): Promise<BenchResult> {
  const { model, stimuliCount, batch, repeats, loaded, size } = recordBenchSettings();
  const work = scratch();
  const sessions: NetworkSession[] = [];
  try {
    const { path, data } = benchStimuli(work.folder, stimuliCount, size);
    const per = 3 * size * size;
    const inspection = await inspectModel(loaded, { inputShape: [1, 3, size, size] });
    const defaultNames = selectLayers(inspection.layers, 'default').map((l) => l.name);
    const bareSession = await createNetworkSession(readFileSync(model), { threads: THREADS });
    const exposedSession = await createNetworkSession(exposeTensors(loaded, defaultNames), { threads: THREADS });
    // parked runtime threads, as a record runs them: their CPU time is work, not spinning
    const fetchingSession = await createNetworkSession(exposeTensors(loaded, defaultNames), { threads: THREADS, spinning: false });
    sessions.push(bareSession, exposedSession, fetchingSession);
    const logits = loaded.proto.graph!.output![0]!.name!;
    const cpu = { bare: [] as number[], fetched: [] as number[], default: [] as number[], defaultSystem: [] as number[], float16: [] as number[], float16System: [] as number[] };
    const infer = async (session: NetworkSession, fetch: readonly string[] = [logits], cpuInto?: number[]): Promise<number> => {
      const start = performance.now();
      const used = process.cpuUsage();
      for (let first = 0; first < stimuliCount; first += batch) {
        const rows = Math.min(batch, stimuliCount - first);
        await session.run({ [loaded.input.name]: { data: data.slice(first * per, (first + rows) * per), dims: [rows, 3, size, size] } }, fetch);
      }
      const spent = process.cpuUsage(used);
      cpuInto?.push((spent.user + spent.system) / 1e6);
      return (performance.now() - start) / 1000;
    };
    let out = 0;
    const record = async (options: Partial<RecordOptions>): Promise<{ seconds: number; setup: number; bytes: number; cpu: number; system: number }> => {
      const start = performance.now();
      const used = process.cpuUsage();
      const summary = await recordSnapshot({ model, stimuli: path, out: join(work.folder, `snap${out++}`), layers: 'default', batch, threads: THREADS, ...options });
      const seconds = (performance.now() - start) / 1000;
      const spent = process.cpuUsage(used);
      rmSync(summary.folder, { recursive: true, force: true }); // so the next run does not wait on this one's writeback
      return { seconds, setup: summary.setupSeconds, bytes: summary.bytesWritten, cpu: (spent.user + spent.system) / 1e6, system: spent.system / 1e6 };
    };
    const variants: Record<string, Partial<RecordOptions>> = {
      default: {},
      all: { layers: 'all' },
      'default, writes on the main thread': { writeInBackground: false },
      'default, writes through the page cache': { diskWrites: 'cached' },
      'default, runtime threads spinning': { runtimeSpinning: true },
      'default float16': { dtype: 'float16' },
      'default float16 converted in JavaScript': { dtype: 'float16', float16InGraph: false },
    };
    // before each timed run: the garbage of the last one collected and a moment for its freed memory to
    // go back, so no run pays for another's
    const settle = async (): Promise<void> => {
      collectGarbage();
      await new Promise((resolve) => setTimeout(resolve, 300));
    };
    await infer(bareSession); // warm-up
    await record({});
    const times: Record<string, number[]> = { bare: [], exposed: [], fetched: [], fsync: [], setup: [], setupAll: [], sha256: [], pageCache: [] };
    const bytes: Record<string, number> = {};
    for (let r = 0; r < repeats; r++) {
      times['fsync']!.push(fsyncWriteRate(work.folder));
      times['pageCache']!.push(pageCacheWriteRate(work.folder));
      times['sha256']!.push(sha256Rate());
      await settle();
      times['bare']!.push(await infer(bareSession, [logits], cpu.bare));
      await settle();
      times['exposed']!.push(await infer(exposedSession));
      await settle();
      times['fetched']!.push(await infer(fetchingSession, defaultNames, cpu.fetched));
      // each repeat starts at another variant, so that none is always the first after the inference runs
      const order = Object.entries(variants);
      for (const [name, options] of [...order.slice((r * 3) % order.length), ...order.slice(0, (r * 3) % order.length)]) {
        await settle();
        const result = await record(options);
        (times[name] ??= []).push(result.seconds);
        bytes[name] = result.bytes;
        if (name === 'default') cpu.default.push(result.cpu), cpu.defaultSystem.push(result.system), times['setup']!.push(result.setup);
        if (name === 'all') times['setupAll']!.push(result.setup);
        if (name === 'default float16') cpu.float16.push(result.cpu), cpu.float16System.push(result.system);
      }
    }
    const cores = Math.min(THREADS, availableParallelism());
    const fusedAway = await tensorsFusedAway(loaded, defaultNames);
    const bare = median(times['bare']!);
    const rate = median(times['fsync']!);
    const floor = (name: string) => Math.max(bare, bytes[name]! / rate);
    const t = (name: string) => median(times[name]!);
    // the least CPU a recording of these bytes needs here, spread over the cores: the runtime handing the
    // tensors over, hashing them once and copying them into the page cache once
    const direct = wantsDirectWrites(join(work.folder, 'x'), 'auto');
    const directNote = direct ? 'O_DIRECT (the scratch folder is on a local disk file system)' : 'through the page cache (the scratch folder is not on a local disk file system)';
    // with direct writes the kernel copies nothing into the page cache: that term drops out
    const cpuFloor = (median(cpu.fetched) + bytes['default']! / median(times['sha256']!) + (direct ? 0 : bytes['default']! / median(times['pageCache']!))) / cores;
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
        'record default set-up s (until the session is ready)': t('setup'),
        'ratio default to floor, setup excluded': (t('default') - t('setup')) / floor('default'),
        'record all s': t('all'),
        'written all MB': bytes['all']! / 1e6,
        'floor all s': floor('all'),
        'ratio all to floor': t('all') / floor('all'),
        'ratio all to floor, setup excluded': (t('all') - t('setupAll')) / floor('all'),
        'record default, writes on the main thread s': t('default, writes on the main thread'),
        'writer thread gain (main thread / writer thread)': t('default, writes on the main thread') / t('default'),
        'record default, writes through the page cache s': t('default, writes through the page cache'),
        'direct write gain (page cache / default)': t('default, writes through the page cache') / t('default'),
        'record default with spinning runtime threads s': t('default, runtime threads spinning'),
        'parking gain (spinning / parked)': t('default, runtime threads spinning') / t('default'),
        'record default float16 s': t('default float16'),
        'float16 / float32': t('default float16') / t('default'),
        'float16 converted in JavaScript / float32': t('default float16 converted in JavaScript') / t('default'),
        'inference with the default layers exposed, not fetched s': t('exposed'),
        'exposure cost (exposed / bare inference)': t('exposed') / bare,
        'inference with the default layers exposed and fetched s': t('fetched'),
        'runtime share of a record (exposed and fetched / bare inference)': t('fetched') / bare,
        'record default over exposed and fetched inference': t('default') / t('fetched'),
        'bare inference CPU s (all threads)': median(cpu.bare),
        'exposed and fetched inference CPU s': median(cpu.fetched),
        'record default CPU s (all threads)': median(cpu.default),
        'record default kernel CPU s': median(cpu.defaultSystem),
        [`record default CPU use (share of ${cores} cores over its wall time)`]: median(cpu.default) / (cores * t('default')),
        'record default float16 CPU s': median(cpu.float16),
        'record default float16 kernel CPU s': median(cpu.float16System),
        'SHA-256 MB/s (one core)': median(times['sha256']!) / 1e6,
        'page-cache write MB/s (no fsync)': median(times['pageCache']!) / 1e6,
        'CPU floor of the default record s': cpuFloor,
        'CPU floor / floor (above 1.3: the target cannot be met on these cores)': cpuFloor / floor('default'),
        'record default / CPU floor': t('default') / cpuFloor,
        'default layers': defaultNames.length,
        'default layers the runtime fuses away or re-lays': fusedAway.length,
      },
      targets: { 'ratio default to floor': '<= 1.3', 'ratio all to floor': '<= 1.3', 'float16 / float32': '<= 0.6' },
      notes: [
        'CPU floor = (CPU of inference with the tensors exposed and fetched + bytes ÷ SHA-256 rate + bytes ÷ page-cache write rate, the last only where writes go through the page cache) ÷ cores: the work no recording through onnxruntime-node that hashes what it writes can skip, perfectly spread',
        'runtime share: what onnxruntime-node itself takes to hand the tensors over (layout conversions of exposed tensors, the copy into JavaScript buffers), the least any recorder built on it pays; CPU s: user + kernel time of every thread of the process during the run (the runtime\'s, the main thread\'s, the writer thread\'s)',
        `default writes: ${directNote}; the page-cache variant writes every file through the cache (--disk-writes cached)`,
        'floor = max(bare inference, bytes written ÷ fsync write rate); record time includes model loading and hashing, inspection (probe run), session creation, stimulus reading, channel means, Arrow encoding, SHA-256 and fsync; set-up = the time a record takes until its runtime session is ready (model loading and hashing, inspection, exposing the tensors, session creation; bare inference times runs only)',
        `fused away or re-laid (not held as they are in the optimised graph): ${[...new Set(fusedAway.map((n) => inspection.layers.find((l) => l.name === n)!.op))].join(', ') || 'none'}`,
      ],
    };
  } finally {
    for (const session of sessions) await session.close();
    work.dispose();
  }
}
