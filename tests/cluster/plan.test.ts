/**
 * planClusterRun: the scripts a plan writes, run here by bash as Slurm would run them (task K with
 * SLURM_ARRAY_TASK_ID=K, then the merge job), give what the unsplit command gives on one machine — for
 * the partial statistics of diff, tune and sense (combined by exact formulas: compared at 1e-9 relative,
 * as in tests/robustness/sharding.test.ts) — and a task run again (a requeue) leaves its shard as it was.
 * The same scripts under a real scheduler: tests/cluster/slurm-run.test.ts. Refusals: a run folder with
 * foreign files, another plan in it, an existing result, a modulated record whose --from is no plan.
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { planClusterRun, readClusterPlan } from '../../src/cluster/plan.js';
import type { ClusterPlan } from '../../src/cluster/plan-types.js';
import { readSensitivityTable, readTuningTable } from '../../src/snapshot/tables.js';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';
import { ensureBuilt, ROOT } from '../robustness/cli-process.js';

const MODEL = join(ROOT, 'models', 'demo', 'glyphnet.onnx');
const SITE = '/conv4/relu/Relu_output_0';
let dir: string;
let stimuli: string[];

async function sonde(args: string[]): Promise<string> {
  const r = await runSonde(args);
  expect(r.code, `sonde ${args.join(' ')}: ${r.stderr}`).toBe(0);
  return r.stdout;
}

/** Runs task K of the array script, as Slurm's array task K would. */
function runTask(plan: ClusterPlan, k: number): string {
  const done = spawnSync('bash', [plan.scripts.array], { cwd: plan.cwd, encoding: 'utf8', env: { ...process.env, SLURM_ARRAY_TASK_ID: String(k), SLURM_CPUS_PER_TASK: '1' } });
  expect(done.status, `task ${k}: ${done.stderr}`).toBe(0);
  return done.stdout;
}

function runMerge(plan: ClusterPlan): void {
  const done = spawnSync('bash', [plan.scripts.merge], { cwd: plan.cwd, encoding: 'utf8', env: { ...process.env, SLURM_CPUS_PER_TASK: '1' } });
  expect(done.status, `merge: ${done.stderr}`).toBe(0);
}

/** Every number of `got` within `relative` of `want` (1e-12 absolute near zero); all else equal. */
function expectClose(got: unknown, want: unknown, relative: number, path = '$'): void {
  if (typeof want === 'number' && typeof got === 'number') {
    if (Number.isNaN(want)) return expect(Number.isNaN(got), path).toBe(true);
    expect(Math.abs(got - want), `${path}: ${got} vs ${want}`).toBeLessThanOrEqual(relative * Math.abs(want) + 1e-12);
    return;
  }
  if (Array.isArray(want)) {
    expect((got as unknown[]).length, path).toBe(want.length);
    want.forEach((w, i) => expectClose((got as unknown[])[i], w, relative, `${path}[${i}]`));
    return;
  }
  if (want && typeof want === 'object') {
    expect(Object.keys(got as object).sort(), path).toEqual(Object.keys(want).sort());
    for (const [k, w] of Object.entries(want)) expectClose((got as Record<string, unknown>)[k], w, relative, `${path}.${k}`);
    return;
  }
  expect(got, path).toEqual(want);
}

beforeAll(async () => {
  ensureBuilt(); // the scripts run bin/sonde, which runs dist/
  dir = tempFolder('sonde-plan-');
  await sonde(['stimuli', 'make', '--out', join(dir, 'displays'), '--count', '20', '--seed', '3', '--format', 'npy', '--cued', 'ring']);
  stimuli = ['--stimuli', join(dir, 'displays', 'stimuli.npy'), '--labels', join(dir, 'displays', 'labels.csv')];
  writeFileSync(join(dir, 'gain.json'), JSON.stringify({ site: SITE, kind: 'uniform', gain: 1.5 }));
  await sonde(['record', MODEL, ...stimuli, '--layers', 'all', '--batch', '4', '--threads', '1', '--out', join(dir, 'base')]);
  await sonde(['record', MODEL, ...stimuli, '--modulate', join(dir, 'gain.json'), '--from', join(dir, 'base'), '--threads', '1', '--out', join(dir, 'mod')]);
}, 240_000);

describe('planClusterRun', () => {
  it('planClusterRun(diff) scripts run task by task and merged equal one diff; a rerun task keeps its shard', async () => {
    const job = ['diff', join(dir, 'base'), join(dir, 'mod'), '--task', 'labels', '--bootstrap', '100'];
    const plan = await planClusterRun({ run: join(dir, 'run-diff'), tasks: 3, job, cpus: 1 });
    expect(plan.result).toBe(join(dir, 'run-diff', 'result.json'));
    for (const k of [1, 2, 3]) runTask(plan, k);
    const before = statSync(join(plan.run, 'shards', '2.json')).mtimeMs;
    expect(runTask(plan, 2)).toMatch(/already written; nothing to do/);
    expect(statSync(join(plan.run, 'shards', '2.json')).mtimeMs).toBe(before);
    runMerge(plan);
    const whole = JSON.parse(await sonde([...job, '--json'])) as unknown;
    expectClose(JSON.parse(readFileSync(plan.result, 'utf8')), whole, 1e-9);
  }, 120_000);

  it('planClusterRun(tune) and planClusterRun(sense) merge to the single tables', async () => {
    const tune = await planClusterRun({ run: join(dir, 'run-tune'), tasks: 3, job: ['tune', join(dir, 'base'), '--out', join(dir, 'tuning-merged.arrow')], cpus: 1 });
    for (const k of [1, 2, 3]) runTask(tune, k);
    runMerge(tune);
    await sonde(['tune', join(dir, 'base'), '--out', join(dir, 'tuning.arrow')]);
    const plainTune = (path: string) => readTuningTable(path).blocks.map((b) => ({ ...b, mean: Array.from(b.mean), sem: Array.from(b.sem), tuning: Array.from(b.tuning) }));
    expectClose(plainTune(join(dir, 'tuning-merged.arrow')), plainTune(join(dir, 'tuning.arrow')), 1e-9);

    const senseJob = ['sense', MODEL, '--from', join(dir, 'base'), '--site', SITE, '--readout', 'logits', '--method', 'secant'];
    const sense = await planClusterRun({ run: join(dir, 'run-sense'), tasks: 2, job: [...senseJob, '--out', join(dir, 'sens-merged.arrow')], cpus: 1 });
    expect(readFileSync(sense.scripts.array, 'utf8')).toContain('--threads "$THREADS"');
    for (const k of [1, 2]) runTask(sense, k);
    runMerge(sense);
    await sonde([...senseJob, '--threads', '1', '--out', join(dir, 'sens.arrow')]);
    const plainSense = (path: string) => readSensitivityTable(path).blocks.map((b) => ({ ...b, sensitivity: Array.from(b.sensitivity), fdError: Array.from(b.fdError), count: Array.from(b.count) }));
    expectClose(plainSense(join(dir, 'sens-merged.arrow')), plainSense(join(dir, 'sens.arrow')), 1e-9);
  }, 180_000);

  it('planClusterRun(record --modulate) pairs task K with shard K of the baseline run and merges against its result', async () => {
    const base = await planClusterRun({ run: join(dir, 'run-b'), tasks: 2, job: ['record', MODEL, ...stimuli, '--out', join(dir, 'b-merged')] });
    const mod = await planClusterRun({ run: join(dir, 'run-m'), tasks: 2, job: ['record', MODEL, ...stimuli, '--modulate', join(dir, 'gain.json'), '--from', join(dir, 'run-b'), '--out', join(dir, 'm-merged')] });
    expect(mod.baselineRun).toBe(base.run);
    expect(mod.baselineResult).toBe(join(dir, 'b-merged'));
    const script = readFileSync(mod.scripts.array, 'utf8');
    expect(script).toContain('--from "${BASELINE_RUN}/shards/$K"');
    expect(script).toContain('--resume');
    expect(readFileSync(mod.scripts.merge, 'utf8')).toContain(`--baseline ${join(dir, 'b-merged')}`);
    // a bare --out name goes under snapshots/ of the working folder, as for record itself
    const bare = await planClusterRun({ run: join(dir, 'run-bare'), tasks: 2, job: ['record', MODEL, ...stimuli, '--out', 'glyph-base'], cwd: dir });
    expect(bare.result).toBe(join(dir, 'snapshots', 'glyph-base'));
    const sweep = await planClusterRun({ run: join(dir, 'run-sweep-bare'), tasks: 2, job: ['sweep', MODEL, '--from', join(dir, 'base'), '--sites', SITE, '--task', 'detect:ring', '--out', 'sweep1'], cwd: dir, memory: '1G' });
    expect(sweep.result).toBe(join(dir, 'snapshots', 'sweep1'));
    expect(readClusterPlan(bare.run)).toEqual(bare);
  });

  it('planClusterRun refuses what would mix runs or overwrite results', async () => {
    const job = ['tune', join(dir, 'base'), '--out', join(dir, 't-refuse.arrow')];
    await expect(planClusterRun({ run: join(dir, 'run-m2'), tasks: 2, job: ['record', MODEL, ...stimuli, '--modulate', join(dir, 'gain.json'), '--from', join(dir, 'base'), '--out', join(dir, 'x')] })).rejects.toThrow(/is not the run folder of a baseline record plan/);
    await planClusterRun({ run: join(dir, 'run-b2'), tasks: 2, job: ['record', MODEL, ...stimuli, '--out', join(dir, 'b2-merged')] });
    await expect(planClusterRun({ run: join(dir, 'run-m3'), tasks: 3, job: ['record', MODEL, ...stimuli, '--modulate', join(dir, 'gain.json'), '--from', join(dir, 'run-b2'), '--out', join(dir, 'x')] })).rejects.toThrow(/has 2 tasks, this plan 3/);
    mkdirSync(join(dir, 'busy'));
    writeFileSync(join(dir, 'busy', 'notes.txt'), 'mine');
    await expect(planClusterRun({ run: join(dir, 'busy'), tasks: 2, job })).rejects.toThrow(/holds files a plan does not write \(notes\.txt\)/);
    await planClusterRun({ run: join(dir, 'run-t2'), tasks: 2, job });
    await planClusterRun({ run: join(dir, 'run-t2'), tasks: 2, job }); // the same plan again: harmless
    await expect(planClusterRun({ run: join(dir, 'run-t2'), tasks: 4, job })).rejects.toThrow(/holds the plan of another job or another number of tasks/);
    writeFileSync(join(dir, 'existing.arrow'), 'a table of an earlier run');
    await expect(planClusterRun({ run: join(dir, 'run-t3'), tasks: 2, job: ['tune', join(dir, 'base'), '--out', join(dir, 'existing.arrow')] })).rejects.toThrow(/exists already/);
    await expect(planClusterRun({ run: join(dir, 'run-t4'), tasks: 21, job })).rejects.toThrow(/holds 20 stimuli, fewer than the tasks/);
    await expect(planClusterRun({ run: join(dir, 'run-t4b'), tasks: 21, job: ['record', MODEL, ...stimuli, '--out', join(dir, 'x')] })).rejects.toThrow(/stimuli\.npy holds 20 stimuli, fewer than the tasks/);
    await expect(planClusterRun({ run: join(dir, 'run-t5'), tasks: 2, job, time: '4 hours' })).rejects.toThrow(/not a Slurm time limit/);
    await expect(planClusterRun({ run: join(dir, 'run-t6'), tasks: 2, job, memory: 'lots' })).rejects.toThrow(/--mem "lots" is not a memory size/);
    await expect(planClusterRun({ run: join(dir, 'run\nt8'), tasks: 2, job })).rejects.toThrow(/contains a line break/);
    await expect(planClusterRun({ run: join(dir, 'run-t7'), tasks: 2, job: ['tune', join(dir, 'base'), '--out', join(dir, 'run-t7', 'x.arrow')] })).rejects.toThrow(/must be apart/);
  });

  it('cluster plan prints the scripts and how to submit them; without -- it says what is missing', async () => {
    const r = await runSonde(['cluster', 'plan', join(dir, 'run-cli'), '--tasks', '2', '--mem', '2G', '--time', '01:00:00', '--', 'tune', join(dir, 'base'), '--out', join(dir, 't-cli.arrow')]);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/over 2 tasks/);
    expect(r.stdout).toMatch(/2048 MiB each \(as given\), 01:00:00/);
    expect(r.stdout).toContain(`sbatch --parsable ${join(dir, 'run-cli', 'array.sbatch')}`);
    const script = readFileSync(join(dir, 'run-cli', 'array.sbatch'), 'utf8');
    expect(script).toMatch(/^#SBATCH --array=1-2$/m);
    expect(script).toMatch(/^#SBATCH --mem=2048M$/m);
    expect(script).toMatch(/^#SBATCH --time=01:00:00$/m);
    expect(spawnSync('bash', ['-n', join(dir, 'run-cli', 'merge.sbatch')]).status).toBe(0);
    const none = await runSonde(['cluster', 'plan', join(dir, 'run-cli2'), '--tasks', '2', '--', 'layers', MODEL]);
    expect(none.code).toBe(2);
    expect(none.stderr).toMatch(/cannot split "layers"/);
  });
});
