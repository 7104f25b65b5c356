/**
 * Submits a plan's scripts with `sbatch`: the array (all tasks, or only some for a rerun), then the
 * merge job with `--dependency=afterok:ARRAY` so it starts only when every task of the array succeeded.
 * Each submission is appended to `RUN/submitted.jsonl` (job ids and time), for the record.
 */
import { spawnSync } from 'node:child_process';
import { appendFileSync } from 'node:fs';
import { join } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import type { ClusterPlan } from './plan-types.js';

/** Options of `submitClusterRun`. */
export interface SubmitOptions {
  /** Only these tasks (1-based), e.g. the missing ones; default all. */
  only?: readonly number[];
  /** Job ids the array waits for (afterok), e.g. the baseline's array for a modulated record. */
  after?: readonly string[];
  /** Submit the array only, not the merge job. */
  noMerge?: boolean;
  /** The sbatch program (default `sbatch` on PATH). */
  sbatch?: string;
}

/** Job ids of one submission. */
export interface Submission {
  array: string;
  merge: string | null;
  tasks: number[];
}

/**
 * Parses a task list such as `3,7,10-12` against N.
 * @throws UsageError for anything else, or a task outside 1..N.
 */
export function parseTaskList(text: string, tasks: number): number[] {
  const chosen = new Set<number>();
  for (const part of text.split(',')) {
    const match = /^\s*(\d+)\s*(?:-\s*(\d+)\s*)?$/.exec(part);
    const first = match ? Number(match[1]) : NaN;
    const last = match?.[2] !== undefined ? Number(match[2]) : first;
    if (!match || first < 1 || last > tasks || last < first) {
      throw new UsageError('E_CLUSTER_TASKS', `--only ${JSON.stringify(text)}: ${JSON.stringify(part.trim())} is not a task or range within 1..${tasks}`, { hint: 'e.g. --only 3,7,10-12' });
    }
    for (let k = first; k <= last; k++) chosen.add(k);
  }
  return [...chosen].sort((a, b) => a - b);
}

/** Slurm's `--array` value for a sorted task list: runs of consecutive tasks as ranges (`1-3,7`). */
export function arraySpec(tasks: readonly number[]): string {
  const parts: string[] = [];
  for (let i = 0; i < tasks.length; ) {
    let j = i;
    while (j + 1 < tasks.length && tasks[j + 1] === tasks[j]! + 1) j++;
    parts.push(i === j ? `${tasks[i]}` : `${tasks[i]}-${tasks[j]}`);
    i = j + 1;
  }
  return parts.join(',');
}

/**
 * Submits the plan.
 * @returns the job ids.
 * @throws RuntimeFailure (E_SBATCH) when sbatch is missing or refuses the script, quoting its message.
 */
export function submitClusterRun(plan: ClusterPlan, options: SubmitOptions = {}): Submission {
  const tasks = options.only ? [...options.only] : Array.from({ length: plan.tasks }, (_, i) => i + 1);
  const after = (options.after ?? []).map((id) => id.trim());
  for (const id of after) if (!/^\d+(_\d+)?$/.test(id)) throw new UsageError('E_CLUSTER_TASKS', `--after ${JSON.stringify(id)} is not a Slurm job id`, { hint: 'give the numeric id sbatch printed, e.g. --after 4211' });
  const array = sbatch(options.sbatch ?? 'sbatch', [`--array=${arraySpec(tasks)}`, ...(after.length > 0 ? [`--dependency=afterok:${after.join(':')}`] : []), plan.scripts.array], plan);
  const merge = options.noMerge ? null : sbatch(options.sbatch ?? 'sbatch', [`--dependency=afterok:${array}`, plan.scripts.merge], plan);
  appendFileSync(join(plan.run, 'submitted.jsonl'), `${JSON.stringify({ at: new Date().toISOString(), array, merge, tasks: arraySpec(tasks), after })}\n`);
  return { array, merge, tasks };
}

function sbatch(program: string, args: string[], plan: ClusterPlan): string {
  const done = spawnSync(program, ['--parsable', ...args], { cwd: plan.cwd, encoding: 'utf8' });
  if (done.error) {
    const code = (done.error as NodeJS.ErrnoException).code;
    throw new RuntimeFailure('E_SBATCH', `cannot run ${program} (${code ?? done.error.message})`, {
      hint: code === 'ENOENT' ? `submit from a machine with Slurm: sbatch ${plan.scripts.array}, then sbatch --dependency=afterok:ID ${plan.scripts.merge}` : undefined,
    });
  }
  const id = /^(\d+)(;\S+)?\s*$/.exec(done.stdout.trim());
  if (done.status !== 0 || !id) {
    const said = `${done.stderr ?? ''} ${done.stdout ?? ''}`.replace(/\s+/g, ' ').trim();
    throw new RuntimeFailure('E_SBATCH', `sbatch ${args.join(' ')} failed (exit ${done.status ?? done.signal}): ${said || 'no message'}`, { hint: 'the scripts are written; fix the cause (partition, account, limits: --sbatch) and submit again' });
  }
  return id[1]!;
}
