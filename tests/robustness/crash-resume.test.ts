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
const MOMENTS = KILLS + Math.floor(KILLS / 4);

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

/** Stimuli done at the folder's last checkpoint, or null before the first (progress.json is replaced atomically). */
function readCheckpoint(folder: string): number | null {
  const path = join(folder, 'progress.json');
  if (!existsSync(path)) return null;
  try {
    return (JSON.parse(readFileSync(path, 'utf8')) as { stimuli: number }).stimuli;
  } catch {
    return null; // removed between the two calls: the recording has just finished
  }
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
  it(`record killed with SIGKILL at ${MOMENTS} seeded moments of its progress and resumed equals an uninterrupted recording byte for byte`, async () => {
    const clean = join(dir, 'clean');
    const reference = await runSondeProcess(recordArgs(clean));
    expect(reference.code, reference.stderr).toBe(0);
    const wanted = snapshotFiles(clean);
    expect(wanted.size).toBeGreaterThan(5);
    const rng = createRandom('crash-resume');
    const outcomes: string[] = [];
    for (let i = 0; i < KILLS; i++) {
      const out = join(dir, `run${i}`);
      // kill once (or twice: the second time while resuming)
      const kills = i % 4 === 3 ? 2 : 1;
      for (let k = 0; k < kills; k++) {
        const child = startSonde(recordArgs(out, k > 0 ? ['--resume'] : []));
        const done = finished(child);
        // The moment is tied to the recording's own progress, not to wall time (a loaded machine makes
        // time-based moments miss): wait for a seeded checkpoint count, then a seeded 0–4 ms more, so the
        // kill lands at an arbitrary point of writing the following batches.
        const from = k === 0 ? 0 : (readCheckpoint(out) ?? 0);
        const target = from + Math.floor(rng.uniform() * Math.max(1, 170 - from));
        await waitFor(() => (readCheckpoint(out) ?? -1) >= target || child.exitCode !== null);
        const timer = setTimeout(() => child.kill('SIGKILL'), rng.uniform() * 4);
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
  }, 240_000);
});
