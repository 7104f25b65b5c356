/**
 * The cluster plan file, `RUN/plan.json`: everything the scripts, the status view and a later plan
 * (a modulated record from this baseline run) need to know about a run, so that they work from the run
 * folder alone.
 */
import type { JobLine } from './job-line.js';

/** `kind` of a plan file. */
export const PLAN_KIND = 'sonde.cluster-plan';
/** Version of the plan file this Sonde writes and reads. */
export const PLAN_VERSION = 1;
/** The plan file's name inside the run folder. */
export const PLAN_FILE = 'plan.json';

/** Resources each task (and the merge job) asks for. */
export interface TaskResources {
  /** `--cpus-per-task`; also the runtime threads of the task. */
  cpus: number;
  /** `--mem` in MiB. */
  memoryMib: number;
  /** Where the memory figure comes from: `estimate` (from the model's sizes) or `given` (--mem). */
  memorySource: 'estimate' | 'given';
  /** `--time`, as Slurm reads it, or null for the partition's default. */
  time: string | null;
  partition: string | null;
  account: string | null;
  /** Further `#SBATCH` arguments, verbatim. */
  extra: string[];
}

/** `RUN/plan.json`. */
export interface ClusterPlan {
  kind: typeof PLAN_KIND;
  version: typeof PLAN_VERSION;
  /** When the plan was written (ISO 8601). */
  created: string;
  sondeVersion: string;
  /** Absolute path of the run folder. */
  run: string;
  /** Working folder of the tasks (relative paths in the job are relative to it). */
  cwd: string;
  /** N: tasks in the array, shards of the work. */
  tasks: number;
  /** The job as scanned (its `--out` is `result`). */
  job: JobLine;
  /** Absolute path of the merged result: snapshot folder, table file, sweep folder, or RUN/result.json (diff). */
  result: string;
  /** For a modulated record: the run folder of the baseline's plan, whose shard K task K pairs with. */
  baselineRun: string | null;
  /** For a modulated record: the merged baseline the merged result pairs with. */
  baselineResult: string | null;
  resources: TaskResources;
  /** The command that runs Sonde on the nodes, as words. */
  sonde: string[];
  /** Absolute paths of the two scripts. */
  scripts: { array: string; merge: string };
}
