/**
 * `cluster status`: what a run has produced, judged from its folders alone (no scheduler needed, so it
 * works after the jobs are gone from the queue, on any machine that sees the files).
 *
 * A shard is
 * - `done` when its output is complete: a shard snapshot whose manifest says `complete: true` for shard
 *   K of N; a sweep folder with its `sweep.json`; a partial-statistics file that reads as shard K of N;
 * - `partial` when a task started and did not finish: a snapshot folder with a checkpoint or an
 *   incomplete manifest, a sweep folder with some cells logged, a temporary `.partial` file, or an
 *   output that cannot be read (damaged, or of another shard);
 * - `missing` when nothing of it is there.
 * The tasks to run again are the ones not done; rerunning a partial one continues it (see
 * batch-script.ts), so the same command serves both.
 */
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { parseJson } from '../json.js';
import { LOCK_FILE, readLockOwner } from '../disk/lock.js';
import { readPartial } from '../record/partial-file.js';
import { PROGRESS_FILE, readProgress } from '../snapshot/progress-file.js';
import { shellQuote } from './batch-script.js';
import type { ClusterPlan } from './plan-types.js';
import { arraySpec } from './submit.js';

/** State of one shard. */
export interface ShardStatus {
  /** K, 1-based. */
  task: number;
  state: 'done' | 'partial' | 'missing';
  /** Where it is written. */
  path: string;
  /** What was found, in words (e.g. "48 of 103 stimuli checkpointed"). */
  detail: string;
}

/** The status of a run. */
export interface RunStatus {
  run: string;
  kind: ClusterPlan['job']['kind'];
  tasks: number;
  shards: ShardStatus[];
  counts: { done: number; partial: number; missing: number };
  /** Whether the merged result is there. */
  result: { path: string; done: boolean };
  /** Tasks to run again (partial and missing), and the commands that do it; null when all are done. */
  rerun: { tasks: number[]; sonde: string; sbatch: string } | null;
}

/** Reads the state of every shard and of the result of a planned run. */
export function clusterRunStatus(plan: ClusterPlan): RunStatus {
  const shards: ShardStatus[] = [];
  for (let k = 1; k <= plan.tasks; k++) shards.push(shardStatus(plan, k));
  const counts = { done: 0, partial: 0, missing: 0 };
  for (const s of shards) counts[s.state]++;
  const todo = shards.filter((s) => s.state !== 'done').map((s) => s.task);
  const rerun = todo.length === 0 ? null : {
    tasks: todo,
    sonde: `sonde cluster submit ${shellQuote(plan.run)} --only ${arraySpec(todo)}`,
    sbatch: `jobid=$(sbatch --parsable --array=${arraySpec(todo)} ${shellQuote(plan.scripts.array)}) && sbatch --dependency=afterok:$jobid ${shellQuote(plan.scripts.merge)}`,
  };
  return { run: plan.run, kind: plan.job.kind, tasks: plan.tasks, shards, counts, result: { path: plan.result, done: resultDone(plan) }, rerun };
}

function shardStatus(plan: ClusterPlan, k: number): ShardStatus {
  const kind = plan.job.kind;
  if (kind === 'record') return snapshotShard(join(plan.run, 'shards', `${k}`), k, plan.tasks);
  if (kind === 'sweep') return sweepShard(join(plan.run, 'shards', `${k}`), k);
  const path = join(plan.run, 'shards', `${k}.json`);
  if (existsSync(path)) {
    try {
      const part = readPartial(path);
      if (part.shard.index !== k || part.shard.count !== plan.tasks) return { task: k, state: 'partial', path, detail: `holds shard ${part.shard.index}/${part.shard.count}, not ${k}/${plan.tasks}` };
      return { task: k, state: 'done', path, detail: `stimuli ${part.shard.stimuli[0]}..${part.shard.stimuli[1]}` };
    } catch (error) {
      return { task: k, state: 'partial', path, detail: `unreadable: ${(error as Error).message}` };
    }
  }
  if (existsSync(`${path}.partial`)) return { task: k, state: 'partial', path, detail: 'its write was interrupted' };
  return { task: k, state: 'missing', path, detail: 'not started' };
}

function snapshotShard(folder: string, k: number, n: number): ShardStatus {
  const base = { task: k, path: folder };
  if (!existsSync(folder) || (statSync(folder).isDirectory() && readdirSync(folder).length === 0)) return { ...base, state: 'missing', detail: 'not started' };
  const lock = existsSync(join(folder, LOCK_FILE)) ? readLockOwner(join(folder, LOCK_FILE)) : null;
  const writing = lock ? `; being written by pid ${lock.pid} on ${lock.host}` : '';
  const manifest = readManifestFields(folder);
  if (manifest && manifest.complete === true) {
    if (manifest.shard?.index !== k || manifest.shard?.count !== n) return { ...base, state: 'partial', detail: `holds ${manifest.shard ? `shard ${String(manifest.shard.index)}/${String(manifest.shard.count)}` : 'a whole recording'}, not shard ${k}/${n}` };
    return { ...base, state: 'done', detail: `${String(manifest.stimuli?.count)} stimuli, complete` };
  }
  let progress = '';
  try {
    const checkpoint = existsSync(join(folder, PROGRESS_FILE)) ? readProgress(folder) : null;
    const of = typeof manifest?.stimuli?.count === 'number' ? ` of ${manifest.stimuli.count}` : '';
    progress = checkpoint ? `${checkpoint.stimuli}${of} stimuli checkpointed` : 'no checkpoint yet';
  } catch (error) {
    progress = `checkpoint unreadable (${(error as Error).message})`;
  }
  return { ...base, state: 'partial', detail: `${progress}${writing}` };
}

/** The manifest fields the status looks at, or null when there is no readable manifest. */
function readManifestFields(folder: string): { complete?: unknown; shard?: { index?: unknown; count?: unknown } | null; stimuli?: { count?: unknown } } | null {
  try {
    const value = parseJson(readFileSync(join(folder, 'manifest.json'), 'utf8'));
    return typeof value === 'object' && value !== null ? value : null;
  } catch {
    return null;
  }
}

function sweepShard(folder: string, k: number): ShardStatus {
  const base = { task: k, path: folder };
  if (existsSync(join(folder, 'sweep.json'))) return { ...base, state: 'done', detail: `${cellLines(join(folder, 'cells.jsonl'))} cells` };
  if (existsSync(join(folder, 'cells.jsonl'))) return { ...base, state: 'partial', detail: `${cellLines(join(folder, 'cells.jsonl'))} cells logged` };
  return { ...base, state: 'missing', detail: 'not started' };
}

/** Cell lines of a sweep log (its input headers not counted; a torn last line is). */
function cellLines(path: string): number {
  if (!existsSync(path)) return 0;
  return readFileSync(path, 'utf8').split('\n').filter((line) => line.trim() !== '' && !line.includes('"sweepInputs"')).length;
}

function resultDone(plan: ClusterPlan): boolean {
  const path = plan.result;
  switch (plan.job.kind) {
    case 'record':
      try {
        return (parseJson(readFileSync(join(path, 'manifest.json'), 'utf8')) as { complete?: unknown }).complete === true;
      } catch {
        return false;
      }
    case 'sweep':
      return existsSync(join(path, 'sweep.json'));
    default:
      return existsSync(path);
  }
}
