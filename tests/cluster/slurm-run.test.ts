/**
 * The cluster workflow under a real Slurm scheduler (slurmctld + slurmd; `.ci/slurm.sh` starts a
 * single-node one in CI): `cluster plan --submit` writes and submits job arrays for a baseline
 * recording, a modulated recording from it and a sweep on the merged baseline, each with its merge job
 * (afterok); the test waits for the queue to drain and compares the merged results with single runs on
 * one machine — exact property: the merged snapshots are byte-identical to the single recordings
 * (--threads 1 on both sides, shards re-cut as the single run cut them; see tests/robustness/sharding),
 * the merged sweep's cells equal the single sweep's. Then a shard is removed, `cluster status` names it
 * missing with the command that reruns it, and that command restores the same bytes; a task requeued by
 * Slurm (scontrol requeue, as after a pre-emption) leaves its finished shard as it was.
 *
 * Without a scheduler (no sinfo, no idle node) the test is reported skipped with the reason — never
 * passed. SONDE_SLURM_DOWN (set by .ci/slurm.sh when the daemons could not start) is that reason.
 */
import { spawnSync } from 'node:child_process';
import { readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';
import { ensureBuilt, ROOT } from '../robustness/cli-process.js';

const MODEL = join(ROOT, 'models', 'demo', 'glyphnet.onnx');
const SITE = '/conv4/relu/Relu_output_0';

/** Why no scheduler can be used here, or null when a node is idle. */
function schedulerProblem(): string | null {
  if (process.env['SONDE_SLURM_DOWN']) return `Slurm could not be started: ${process.env['SONDE_SLURM_DOWN']}`;
  const info = spawnSync('sinfo', ['-h', '-o', '%T'], { encoding: 'utf8', timeout: 20_000 });
  if (info.error) return `no Slurm scheduler reachable (sinfo: ${(info.error as NodeJS.ErrnoException).code ?? info.error.message}); .ci/run starts one`;
  if (info.status !== 0) return `no Slurm scheduler reachable (sinfo exit ${info.status}: ${info.stderr.trim()})`;
  const states = info.stdout.split('\n').map((s) => s.trim()).filter((s) => s !== '');
  if (!states.some((s) => s === 'idle' || s === 'mixed')) return `Slurm answers but no node is idle (states: ${states.join(', ') || 'none'})`;
  return null;
}

const problem = schedulerProblem();
let dir: string;

/** Waits until none of the jobs is in the queue any more (the test's own timeout bounds the wait). */
async function drained(ids: readonly string[]): Promise<void> {
  for (;;) {
    const queue = spawnSync('squeue', ['-h', '-j', ids.join(','), '-o', '%i %T'], { encoding: 'utf8' });
    if (queue.status === 0 && queue.stdout.trim() === '') return;
    await new Promise((r) => setTimeout(r, 1000));
  }
}

/** Final state of every task of the jobs, e.g. ['COMPLETED', …]. */
function jobStates(ids: readonly string[]): string[] {
  return ids.flatMap((id) => {
    const shown = spawnSync('scontrol', ['show', 'job', '-o', id], { encoding: 'utf8' });
    return [...shown.stdout.matchAll(/JobState=(\S+)/g)].map((m) => m[1]!);
  });
}

function files(folder: string): Map<string, Buffer> {
  const map = new Map<string, Buffer>([['stimuli.arrow', readFileSync(join(folder, 'stimuli.arrow'))]]);
  for (const name of readdirSync(join(folder, 'layers'))) map.set(`layers/${name}`, readFileSync(join(folder, 'layers', name)));
  return map;
}

function expectSameFiles(got: string, want: string): void {
  const a = files(got);
  const b = files(want);
  expect([...a.keys()].sort()).toEqual([...b.keys()].sort());
  for (const [name, bytes] of b) expect(a.get(name)!.equals(bytes), `${got}/${name}`).toBe(true);
}

async function sonde(args: string[]): Promise<string> {
  const r = await runSonde(args);
  expect(r.code, `sonde ${args.join(' ')}: ${r.stderr}`).toBe(0);
  return r.stdout;
}

describe('cluster plan --submit under Slurm', () => {
  beforeAll(async () => {
    if (problem !== null) return;
    ensureBuilt(); // the tasks run bin/sonde, which runs dist/
    dir = tempFolder('sonde-slurm-');
    await sonde(['stimuli', 'make', '--out', join(dir, 'displays'), '--count', '24', '--seed', '5', '--format', 'npy', '--cued', 'ring']);
  }, 120_000);

  it('cluster plan --submit: record, modulated record and sweep arrays merge to the single runs, and status reruns a missing shard', async (ctx) => {
    if (problem !== null) {
      console.warn(`skipped: ${problem}`);
      ctx.skip(problem);
    }
    const stimuli = ['--stimuli', join(dir, 'displays', 'stimuli.npy'), '--labels', join(dir, 'displays', 'labels.csv')];
    const spec = join(dir, 'gain.json');
    writeFileSync(spec, JSON.stringify({ site: SITE, kind: 'uniform', gain: 1.4 }));
    const recordJob = ['record', MODEL, ...stimuli, '--layers', 'all', '--batch', '5'];
    const sweepJob = (from: string) => ['sweep', MODEL, '--from', from, '--sites', SITE, '--schemes', 'uniform', '--strengths', '0,0.25,0.5,1', '--task', 'detect:ring'];
    const submitted = async (args: string[]): Promise<{ array: string; merge: string }> => (JSON.parse(await sonde(args)) as { submitted: { array: string; merge: string } }).submitted;
    const common = ['--tasks', '3', '--cpus', '1', '--submit', '--json'];

    const base = await submitted(['cluster', 'plan', join(dir, 'run-base'), ...common, '--', ...recordJob, '--out', join(dir, 'base')]);
    const mod = await submitted(['cluster', 'plan', join(dir, 'run-mod'), ...common, '--after', base.array, '--', 'record', MODEL, ...stimuli, '--modulate', spec, '--from', join(dir, 'run-base'), '--out', join(dir, 'mod')]);
    const sweep = await submitted(['cluster', 'plan', join(dir, 'run-sweep'), ...common, '--after', base.merge, '--', ...sweepJob(join(dir, 'base')), '--out', join(dir, 'sweep')]);

    // the same work on one machine, while the scheduler runs
    await sonde([...recordJob, '--threads', '1', '--out', join(dir, 'single')]);
    await sonde(['record', MODEL, ...stimuli, '--modulate', spec, '--from', join(dir, 'single'), '--threads', '1', '--out', join(dir, 'single-mod')]);
    await sonde([...sweepJob(join(dir, 'single')), '--threads', '1', '--out', join(dir, 'single-sweep')]);

    const ids = [base.array, base.merge, mod.array, mod.merge, sweep.array, sweep.merge];
    await drained(ids);
    const states = jobStates(ids);
    expect(states.length).toBe(3 * 3 + 3); // three arrays of 3 tasks, three merge jobs
    expect(states.every((s) => s === 'COMPLETED'), `job states ${states.join(' ')}; logs in ${dir}/run-*/logs`).toBe(true);

    expectSameFiles(join(dir, 'base'), join(dir, 'single'));
    expectSameFiles(join(dir, 'mod'), join(dir, 'single-mod'));
    const cells = (folder: string) => (JSON.parse(readFileSync(join(folder, 'sweep.json'), 'utf8')) as { cells: unknown[] }).cells;
    expect(cells(join(dir, 'sweep'))).toEqual(cells(join(dir, 'single-sweep')));
    expect(cells(join(dir, 'sweep')).length).toBe(4);
    for (const run of ['run-base', 'run-mod', 'run-sweep']) {
      const status = JSON.parse(await sonde(['cluster', 'status', join(dir, run), '--json'])) as { counts: Record<string, number>; result: { done: boolean }; rerun: unknown };
      expect(status.counts).toEqual({ done: 3, partial: 0, missing: 0 });
      expect(status.result.done).toBe(true);
      expect(status.rerun).toBeNull();
    }
    // one log per task, appended by each run of the task
    expect(readdirSync(join(dir, 'run-base', 'logs')).sort()).toEqual(['merge.log', 'task-1.log', 'task-2.log', 'task-3.log']);

    // a lost shard: status names it and the command that reruns it; rerunning restores the same bytes
    rmSync(join(dir, 'run-base', 'shards', '2'), { recursive: true });
    const said = await sonde(['cluster', 'status', join(dir, 'run-base')]);
    expect(said).toMatch(/2 done, 0 partial, 1 missing/);
    expect(said).toContain(`sonde cluster submit ${join(dir, 'run-base')} --only 2`);
    const again = JSON.parse(await sonde(['cluster', 'submit', join(dir, 'run-base'), '--only', '2', '--json'])) as { array: string; merge: string };
    await drained([again.array, again.merge]);
    expect(jobStates([again.array, again.merge])).toEqual(['COMPLETED', 'COMPLETED']);
    expectSameFiles(join(dir, 'base'), join(dir, 'single'));
    expect(readFileSync(join(dir, 'run-base', 'logs', 'task-2.log'), 'utf8').match(/task 2\/3 on/g)!.length).toBe(2);

    // Slurm's own requeue (as after a pre-emption) of a finished task: it runs again, finds its shard
    // complete and leaves it byte for byte
    const shardManifest = readFileSync(join(dir, 'run-base', 'shards', '1', 'manifest.json'));
    const requeue = spawnSync('scontrol', ['requeue', `${base.array}_1`], { encoding: 'utf8' });
    expect(requeue.status, requeue.stderr).toBe(0);
    // a requeued job waits about two minutes before it is eligible again (Slurm's requeue delay): start it now
    const now = spawnSync('scontrol', ['update', `JobId=${base.array}_1`, 'StartTime=now'], { encoding: 'utf8' });
    expect(now.status, now.stderr).toBe(0);
    await drained([base.array]);
    const log = readFileSync(join(dir, 'run-base', 'logs', 'task-1.log'), 'utf8');
    expect(log).toMatch(/task 1\/3 on .* restart 1/);
    expect(log).toMatch(/already holds this complete snapshot; nothing to resume/);
    expect(readFileSync(join(dir, 'run-base', 'shards', '1', 'manifest.json')).equals(shardManifest)).toBe(true);
  }, 600_000);
});
