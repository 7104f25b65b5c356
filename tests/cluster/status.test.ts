/**
 * clusterRunStatus: shard states judged from the run folder alone, on real shard outputs written by the
 * plan's own scripts (run by bash as Slurm would): done, missing, and partial (an interrupted write's
 * temporary file; an output of another shard), with the rerun command listing exactly the unfinished tasks.
 */
import { spawnSync } from 'node:child_process';
import { cpSync, renameSync, rmSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { planClusterRun } from '../../src/cluster/plan.js';
import type { ClusterPlan } from '../../src/cluster/plan-types.js';
import { clusterRunStatus } from '../../src/cluster/status.js';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';
import { ensureBuilt, ROOT } from '../robustness/cli-process.js';

const MODEL = join(ROOT, 'models', 'demo', 'glyphnet.onnx');
let dir: string;
let stimuli: string[];

function runTask(plan: ClusterPlan, k: number): void {
  const done = spawnSync('bash', [plan.scripts.array], { cwd: plan.cwd, encoding: 'utf8', env: { ...process.env, SLURM_ARRAY_TASK_ID: String(k), SLURM_CPUS_PER_TASK: '1' } });
  expect(done.status, done.stderr).toBe(0);
}

beforeAll(async () => {
  ensureBuilt();
  dir = tempFolder('sonde-status-');
  const made = await runSonde(['stimuli', 'make', '--out', join(dir, 'displays'), '--count', '12', '--seed', '4', '--format', 'npy']);
  expect(made.code, made.stderr).toBe(0);
  stimuli = ['--stimuli', join(dir, 'displays', 'stimuli.npy'), '--labels', join(dir, 'displays', 'labels.csv')];
}, 120_000);

describe('clusterRunStatus', () => {
  it('clusterRunStatus(plan) of a record run: done, another shard\'s output (partial) and missing shards, and the rerun', async () => {
    const plan = await planClusterRun({ run: join(dir, 'run-rec'), tasks: 4, job: ['record', MODEL, ...stimuli, '--batch', '2', '--out', join(dir, 'rec')], cpus: 1 });
    runTask(plan, 1);
    runTask(plan, 2);
    cpSync(join(plan.run, 'shards', '1'), join(plan.run, 'shards', '3'), { recursive: true });
    const status = clusterRunStatus(plan);
    expect(status.shards.map((s) => s.state)).toEqual(['done', 'done', 'partial', 'missing']);
    expect(status.shards[0]!.detail).toBe('3 stimuli, complete');
    expect(status.shards[2]!.detail).toBe('holds shard 1/4, not shard 3/4');
    expect(status.counts).toEqual({ done: 2, partial: 1, missing: 1 });
    expect(status.result.done).toBe(false);
    expect(status.rerun!.tasks).toEqual([3, 4]);
    expect(status.rerun!.sonde).toBe(`sonde cluster submit ${plan.run} --only 3-4`);
    expect(status.rerun!.sbatch).toContain(`--array=3-4 ${plan.scripts.array}`);
    // with the wrong folder removed, rerunning tasks 3 and 4 completes the run
    rmSync(join(plan.run, 'shards', '3'), { recursive: true });
    runTask(plan, 3);
    runTask(plan, 4);
    expect(clusterRunStatus(plan).rerun).toBeNull();
  }, 120_000);

  it('clusterRunStatus(plan) of partial statistics: an interrupted write is partial, the CLI prints the rerun', async () => {
    await runSonde(['record', MODEL, ...stimuli, '--batch', '4', '--threads', '1', '--out', join(dir, 'snap')]);
    const plan = await planClusterRun({ run: join(dir, 'run-tune'), tasks: 3, job: ['tune', join(dir, 'snap'), '--out', join(dir, 't.arrow')], cpus: 1 });
    runTask(plan, 1);
    runTask(plan, 2);
    renameSync(join(plan.run, 'shards', '2.json'), join(plan.run, 'shards', '2.json.partial'));
    const status = clusterRunStatus(plan);
    expect(status.shards.map((s) => `${s.state}: ${s.detail}`)).toEqual(['done: stimuli 0..3', 'partial: its write was interrupted', 'missing: not started']);
    const printed = await runSonde(['cluster', 'status', plan.run]);
    expect(printed.code).toBe(0);
    expect(printed.stdout).toMatch(/1 done, 1 partial, 1 missing; result .* not written yet/);
    expect(printed.stdout).toContain(`sonde cluster submit ${plan.run} --only 2-3`);
    const notRun = await runSonde(['cluster', 'status', dir]);
    expect(notRun.code).toBe(2);
    expect(notRun.stderr).toMatch(/holds no plan\.json: it is not a cluster run folder/);
  }, 120_000);
});
