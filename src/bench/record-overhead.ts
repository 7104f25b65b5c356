import { join } from 'node:path';
import { readFileSync, rmSync } from 'node:fs';
import { recordSnapshot } from '../record/record-snapshot.js';
import { createNetworkSession } from '../session/network-session.js';
import { benchStimuli, median, REFERENCE_FIXTURES, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const STIMULI = 1024;
const BATCH = 8;
const THREADS = 2;
const REPEATS = 3;

/**
 * Record overhead: wall time of `record` (to disk, float32) over bare runtime inference of the
 * unmodified model on the same inputs, same batch and threads, measured alternately in one process.
 */
export async function benchRecordOverhead(): Promise<BenchResult> {
  const model = join(REFERENCE_FIXTURES, 'residual.onnx');
  const work = scratch();
  try {
    const { path, data } = benchStimuli(work.folder, STIMULI);
    const session = await createNetworkSession(readFileSync(model), { threads: THREADS });
    const per = 3 * 64 * 64;
    const bare = async (): Promise<number> => {
      const start = performance.now();
      for (let first = 0; first < STIMULI; first += BATCH) {
        const rows = Math.min(BATCH, STIMULI - first);
        await session.run({ input: { data: data.slice(first * per, (first + rows) * per), dims: [rows, 3, 64, 64] } });
      }
      return (performance.now() - start) / 1000;
    };
    let out = 0;
    const record = async (layers: string, sessionInWorker = true): Promise<{ seconds: number; bytes: number }> => {
      const start = performance.now();
      const summary = await recordSnapshot({ model, stimuli: path, out: join(work.folder, `snap${out++}`), layers, batch: BATCH, threads: THREADS, sessionInWorker });
      const seconds = (performance.now() - start) / 1000;
      rmSync(summary.folder, { recursive: true, force: true }); // so the next run does not wait on this one's writeback
      return { seconds, bytes: summary.bytesWritten };
    };
    await bare(); // warm-up
    await record('default');
    const bareTimes: number[] = [];
    const defaultTimes: number[] = [];
    const allTimes: number[] = [];
    const sameThreadTimes: number[] = [];
    let defaultBytes = 0;
    let allBytes = 0;
    for (let r = 0; r < REPEATS; r++) {
      bareTimes.push(await bare());
      const d = await record('default');
      defaultTimes.push(d.seconds);
      defaultBytes = d.bytes;
      sameThreadTimes.push((await record('default', false)).seconds);
      bareTimes.push(await bare());
      const a = await record('all');
      allTimes.push(a.seconds);
      allBytes = a.bytes;
    }
    await session.close();
    const bareSeconds = median(bareTimes);
    return {
      name: 'record-overhead',
      description: `record vs bare inference, residual reference model, ${STIMULI} stimuli 3×64×64, batch ${BATCH}, ${THREADS} threads, median of ${REPEATS}`,
      figures: {
        'bare inference s': bareSeconds,
        'record default s': median(defaultTimes),
        'record all s': median(allTimes),
        'ratio default': median(defaultTimes) / bareSeconds,
        'ratio all': median(allTimes) / bareSeconds,
        'record default, network on the main thread s': median(sameThreadTimes),
        'overlap gain (main thread / worker)': median(sameThreadTimes) / median(defaultTimes),
        'written default MB': defaultBytes / 1e6,
        'written all MB': allBytes / 1e6,
      },
      targets: { 'ratio default': '<= 1.20', 'ratio all': '<= 1.40' },
      notes: ['record time includes model inspection (probe run), stimulus reading, channel means, Arrow encoding, SHA-256 and fsync'],
    };
  } finally {
    work.dispose();
  }
}
