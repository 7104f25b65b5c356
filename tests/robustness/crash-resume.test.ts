/**
 * Crash safety: a recording killed with SIGKILL at seeded random moments and resumed with `--resume`
 * ends byte for byte equal to an uninterrupted recording (exact property of the checkpoint design: the
 * layer files are a deterministic function of the batches, and `--threads 1` makes the runtime's output
 * deterministic).
 */
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { writeFileSync } from 'node:fs';
import { beforeAll, describe, expect, it } from 'vitest';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, finished, runSondeProcess, startSonde } from './cli-process.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
const KILLS = 11; // recordings; every fourth is killed a second time while resuming
const MOMENTS = KILLS + Math.floor((KILLS + 1) / 4);

function recordArgs(out: string, extra: string[] = []): string[] {
  // a checkpoint after every batch, so that kills land between many checkpoints
  return ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', out, '--layers', 'all', '--batch', '8', '--threads', '1', '--checkpoint-every', '0', ...extra];
}

/** Every file of a finished snapshot except the manifest, as bytes. */
function snapshotFiles(folder: string): Map<string, Buffer> {
  const files = new Map<string, Buffer>();
  files.set('stimuli.arrow', readFileSync(join(folder, 'stimuli.arrow')));
  for (const name of readdirSync(join(folder, 'layers'))) files.set(`layers/${name}`, readFileSync(join(folder, 'layers', name)));
  return files;
}

/** The manifest without the fields that legitimately differ between runs (times, where). */
function stableManifest(folder: string): unknown {
  const m = JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as Record<string, unknown> & { run: Record<string, unknown> };
  const { created: _c, ...rest } = m;
  const { wallSeconds: _w, ...run } = m.run;
  return { ...rest, run };
}

/** Polls `condition` every 2 ms (at most 30 s). */
async function waitFor(condition: () => boolean): Promise<void> {
  const until = performance.now() + 30_000;
  while (!condition()) {
    if (performance.now() > until) throw new Error('timed out waiting');
    await new Promise((r) => setTimeout(r, 2));
  }
}

beforeAll(async () => {
  ensureBuilt();
  dir = tempFolder('sonde-crash-');
  model = join(dir, 'net.onnx');
  // wide enough that a batch takes a few milliseconds, so kills land inside the recording
  writeFileSync(model, buildTinyNet({ bias: true, widths: [16, 24, 32], input: [3, 32, 32], seed: 5 }));
  stimuli = writeStimuliNpy(dir, [200, 3, 32, 32], 11);
});

describe('record --resume after SIGKILL', () => {
  it(`record killed with SIGKILL at ${MOMENTS} seeded random moments and resumed equals an uninterrupted recording byte for byte`, async () => {
    const clean = join(dir, 'clean');
    const cleanChild = startSonde(recordArgs(clean));
    const cleanDone = finished(cleanChild);
    await waitFor(() => existsSync(join(clean, 'progress.json')));
    const recordingStarted = performance.now();
    const reference = await cleanDone;
    const recordingSeconds = (performance.now() - recordingStarted) / 1000;
    expect(reference.code, reference.stderr).toBe(0);
    const wanted = snapshotFiles(clean);
    expect(wanted.size).toBeGreaterThan(5);
    const rng = createRandom('crash-resume');
    const outcomes: string[] = [];
    for (let i = 0; i < KILLS; i++) {
      const out = join(dir, `run${i}`);
      // kill once (or twice: the second time while resuming) at a seeded moment within the clean run's duration
      const kills = i % 4 === 3 ? 2 : 1;
      for (let k = 0; k < kills; k++) {
        const child = startSonde(recordArgs(out, k > 0 ? ['--resume'] : []));
        let stderr = '';
        child.stderr!.on('data', (d: Buffer) => (stderr += d.toString()));
        const done = finished(child);
        // the moment is measured from the start of the recording proper (after model loading)
        await waitFor(() => (k === 0 ? existsSync(join(out, 'progress.json')) : /resuming|no checkpoint/.test(stderr)) || child.exitCode !== null);
        const delay = rng.uniform() * recordingSeconds * 600; // stay well inside the span: later runs may be faster than the clean one under changing load
        const timer = setTimeout(() => child.kill('SIGKILL'), delay);
        const result = await done;
        clearTimeout(timer);
        outcomes.push(result.signal === 'SIGKILL' ? 'killed' : `exited ${result.code}`);
      }
      const progress = existsSync(join(out, 'progress.json')) ? (JSON.parse(readFileSync(join(out, 'progress.json'), 'utf8')) as { stimuli: number }).stimuli : null;
      const resumed = await runSondeProcess(recordArgs(out, ['--resume']));
      expect(resumed.code, resumed.stderr).toBe(0);
      if (progress !== null && progress > 0) expect(resumed.stderr).toMatch(new RegExp(`resuming .* after ${progress} of 200 stimuli`));
      const got = snapshotFiles(out);
      expect([...got.keys()].sort()).toEqual([...wanted.keys()].sort());
      for (const [name, bytes] of wanted) expect(got.get(name)!.equals(bytes), `${name} after kill ${i} (progress ${progress})`).toBe(true);
      expect(stableManifest(out)).toEqual(stableManifest(clean));
      expect(existsSync(join(out, 'progress.json'))).toBe(false);
      expect(existsSync(join(out, '.lock'))).toBe(false);
    }
    // at least 10 kills must have hit a running recording, or the test proves little
    expect(outcomes.filter((o) => o === 'killed').length, outcomes.join(', ')).toBeGreaterThanOrEqual(10);
  }, 120_000);
});
