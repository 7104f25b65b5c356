/**
 * `cluster plan`: turns one Sonde command into a Slurm job array of N tasks (task K does shard K of N)
 * and a merge job, written into a run folder:
 *
 *   RUN/plan.json        what the run is (see plan-types.ts); read by `cluster status` and later plans
 *   RUN/array.sbatch     the job array (batch-script.ts)
 *   RUN/merge.sbatch     the merge job, submitted with --dependency=afterok on the array
 *   RUN/shards/K         what task K writes: a shard snapshot (record), a sweep folder (sweep), or
 *   RUN/shards/K.json    partial statistics (sense, diff, tune)
 *   RUN/logs/            task-K.log per task (requeued runs append), merge.log
 *
 * The result goes where the job's `--out` says (diff: RUN/result.json). Every node must see the same
 * paths (a shared file system); the run folder, result and inputs are written as absolute paths.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, statSync, chmodSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { RuntimeFailure, UsageError } from '../errors.js';
import { parseJson } from '../json.js';
import { TOOL_VERSION } from '../version.js';
import { replaceFile } from '../disk/atomic-file.js';
import { DEFAULT_SNAPSHOT_PARENT } from '../outputs/output-folder.js';
import { inspectModel } from '../record/inspect-model.js';
import { readNpyHeader } from '../stimuli/npy.js';
import { openStimulusSource } from '../stimuli/source.js';
import { arrayScript, mergeScript } from './batch-script.js';
import { optionValue, parseJobLine, type JobLine } from './job-line.js';
import { PLAN_FILE, PLAN_KIND, PLAN_VERSION, type ClusterPlan } from './plan-types.js';
import { estimateTaskMemoryMib, parseMemoryMib } from './task-memory.js';

/** Options of `planClusterRun`. */
export interface ClusterPlanOptions {
  /** The run folder (created; may hold an earlier plan of the same job). */
  run: string;
  /** N, the tasks of the array. */
  tasks: number;
  /** The Sonde command to split, as words (`['record', 'model.onnx', '--stimuli', …]`). */
  job: readonly string[];
  /** CPUs per task, also the runtime threads (default 4). */
  cpus?: number;
  /** `auto` (default: estimated from the model) or a size such as `8G`. */
  memory?: string;
  /** Slurm `--time`, e.g. `04:00:00`. */
  time?: string;
  partition?: string;
  account?: string;
  /** Further `#SBATCH` arguments, e.g. `--qos=long`. */
  sbatchArgs?: readonly string[];
  /** How the nodes run Sonde, as words (default: this installation's bin/sonde on this Node.js). */
  sonde?: readonly string[];
  /** Write over a different plan in RUN and let the merge replace an existing result. */
  force?: boolean;
  /** Working folder of the tasks (default: the current one). */
  cwd?: string;
}

/** Entries a run folder may hold; anything else makes `cluster plan` refuse the folder. */
const RUN_ENTRIES = new Set([PLAN_FILE, `${PLAN_FILE}.partial`, 'array.sbatch', 'array.sbatch.partial', 'merge.sbatch', 'merge.sbatch.partial', 'shards', 'logs', 'submitted.jsonl', 'result.json', 'result.json.partial', 'cells.jsonl.partial']);

/**
 * This installation's `bin/sonde` (from src/cluster or dist/cluster alike), run as a program so that its
 * shell lines set malloc's arenas (src/malloc-arenas.ts), on this Node.js.
 */
function defaultSonde(): string[] {
  return ['env', `SONDE_NODE=${process.execPath}`, fileURLToPath(new URL('../../bin/sonde', import.meta.url))];
}

/**
 * Writes the plan, the array script and the merge script into the run folder.
 * @returns the plan.
 * @throws UsageError for a bad job, bad resources, N larger than the stimuli of a given snapshot, a run
 *   folder holding other files or another plan (without `force`), a result that exists already
 *   (without `force`), or a modulated record whose `--from` is not a record plan's run folder of the same N.
 */
export async function planClusterRun(options: ClusterPlanOptions): Promise<ClusterPlan> {
  const cwd = resolve(options.cwd ?? process.cwd());
  const at = (path: string): string => resolve(cwd, path);
  const tasks = options.tasks;
  if (!Number.isSafeInteger(tasks) || tasks < 1) throw new UsageError('E_CLUSTER_PLAN', `--tasks must be a positive integer, got ${tasks}`);
  const cpus = options.cpus ?? 4;
  if (!Number.isSafeInteger(cpus) || cpus < 1) throw new UsageError('E_CLUSTER_PLAN', `--cpus must be a positive integer, got ${cpus}`);
  const job = parseJobLine(options.job);
  const run = at(options.run);
  for (const [name, value] of [['--time', options.time], ['--partition', options.partition], ['--account', options.account]] as const) {
    if (value !== undefined && (value.trim() === '' || /[\n\r]/.test(value))) throw new UsageError('E_CLUSTER_PLAN', `${name} ${JSON.stringify(value)} is empty or spans lines`);
  }
  if (options.time !== undefined && !/^(\d+-)?\d+(:\d{1,2}){0,2}$/.test(options.time.trim())) {
    throw new UsageError('E_CLUSTER_PLAN', `--time ${JSON.stringify(options.time)} is not a Slurm time limit`, { hint: 'use MINUTES, HH:MM:SS or D-HH:MM:SS, e.g. 04:00:00' });
  }
  for (const arg of options.sbatchArgs ?? []) {
    if (!/^--?[A-Za-z]/.test(arg) || /[\n\r]/.test(arg)) throw new UsageError('E_CLUSTER_PLAN', `--sbatch ${JSON.stringify(arg)} must be one sbatch option on one line, e.g. --qos=long`);
  }

  // where the result goes (record: a bare name goes under snapshots/, as for record itself)
  const result = job.kind === 'diff' ? join(run, 'result.json') : job.kind === 'record' || job.kind === 'sweep' ? outFolder(job.out!, cwd) : at(job.out!);
  if (job.kind !== 'diff' && (result === run || result.startsWith(`${run}/`) || run.startsWith(`${result}/`))) {
    throw new UsageError('E_CLUSTER_PLAN', `the result ${result} and the run folder ${run} must be apart (neither inside the other)`, { hint: 'give --out a path outside the run folder' });
  }

  // #SBATCH directives are single lines: a path with a line break cannot be written into one
  for (const [what, path] of [['run folder', run], ['working folder', cwd], ['result', result]] as const) {
    if (/[\n\r]/.test(path)) throw new UsageError('E_CLUSTER_PLAN', `the ${what} ${JSON.stringify(path)} contains a line break, which a batch script directive cannot hold`, { hint: 'choose a path without line breaks' });
  }

  // a modulated record pairs task K with shard K of a baseline run
  let baselineRun: string | null = null;
  let baselineResult: string | null = null;
  const from = optionValue(job, '--from');
  if (job.kind === 'record' && from !== undefined) {
    const base = readPlanIfAny(at(from));
    if (base === null || base.job.kind !== 'record' || optionValue(base.job, '--modulate') !== undefined) {
      throw new UsageError('E_CLUSTER_PLAN', `record job: --from ${from} is not the run folder of a baseline record plan; a modulated task K needs the baseline's shard K`, {
        hint: 'plan the baseline first (sonde cluster plan RUN_BASE --tasks N -- record … --out base) and give --from RUN_BASE',
      });
    }
    if (base.tasks !== tasks) throw new UsageError('E_CLUSTER_PLAN', `record job: the baseline run ${from} has ${base.tasks} tasks, this plan ${tasks}; shard K must be the same stimuli`, { hint: `use --tasks ${base.tasks}` });
    baselineRun = base.run;
    baselineResult = base.result;
  }

  // N must not exceed the items split, where they are known now (the stimuli of a given snapshot)
  const snapshot = job.kind === 'diff' || job.kind === 'tune' ? job.positionals[0] : job.kind === 'sense' ? optionValue(job, '--from') : undefined;
  const stimuli = job.kind === 'record' && from === undefined ? optionValue(job, '--stimuli') : undefined;
  const source = snapshot ?? stimuli;
  if (source !== undefined) {
    const count = snapshot !== undefined ? stimulusCount(at(snapshot)) : listedStimuli(at(stimuli!), optionValue(job, '--labels'), at);
    if (count !== null && count < tasks) throw new UsageError('E_CLUSTER_PLAN', `--tasks ${tasks}: ${source} holds ${count} stimuli, fewer than the tasks (a shard must not be empty)`, { hint: `use --tasks ${count} or fewer` });
  }

  const memory = options.memory ?? 'auto';
  const given = parseMemoryMib(memory);
  if (given === undefined) throw new UsageError('E_CLUSTER_PLAN', `--mem ${JSON.stringify(memory)} is not a memory size`, { hint: 'use auto, or a size such as 8G or 1500M' });
  const memoryMib = given ?? (await estimateMemory(job, at));

  prepareRunFolder(run, job, tasks, options.force ?? false);
  if (!(options.force ?? false) && existsSync(result) && !sameJobPlanned(run, job, tasks)) {
    throw new UsageError('E_CLUSTER_PLAN', `the result ${result} exists already; the merge job would replace it`, { hint: 'choose another --out in the job, or pass --force to cluster plan' });
  }
  const plan: ClusterPlan = {
    kind: PLAN_KIND,
    version: PLAN_VERSION,
    created: new Date().toISOString(),
    sondeVersion: TOOL_VERSION,
    run,
    cwd,
    tasks,
    job,
    result,
    baselineRun,
    baselineResult,
    resources: {
      cpus,
      memoryMib,
      memorySource: given === null ? 'estimate' : 'given',
      time: options.time?.trim() ?? null,
      partition: options.partition ?? null,
      account: options.account ?? null,
      extra: [...(options.sbatchArgs ?? [])],
    },
    sonde: options.sonde ? [...options.sonde] : defaultSonde(),
    scripts: { array: join(run, 'array.sbatch'), merge: join(run, 'merge.sbatch') },
  };
  mkdirSync(join(run, 'shards'), { recursive: true });
  mkdirSync(join(run, 'logs'), { recursive: true });
  replaceFile(plan.scripts.array, arrayScript(plan));
  replaceFile(plan.scripts.merge, mergeScript(plan));
  chmodSync(plan.scripts.array, 0o755);
  chmodSync(plan.scripts.merge, 0o755);
  replaceFile(join(run, PLAN_FILE), `${JSON.stringify(plan, null, 2)}\n`);
  return plan;
}

/**
 * Reads `RUN/plan.json`.
 * @throws UsageError when the folder holds no plan, or one that is not a plan of this version.
 */
export function readClusterPlan(run: string): ClusterPlan {
  const plan = readPlanIfAny(resolve(run));
  if (plan === null) throw new UsageError('E_CLUSTER_PLAN', `${run} holds no ${PLAN_FILE}: it is not a cluster run folder`, { hint: 'write one with: sonde cluster plan RUN --tasks N -- COMMAND …' });
  return plan;
}

function readPlanIfAny(run: string): ClusterPlan | null {
  const path = join(run, PLAN_FILE);
  if (!existsSync(path)) return null;
  let value: unknown;
  try {
    value = parseJson(readFileSync(path, 'utf8'));
  } catch (error) {
    throw new UsageError('E_CLUSTER_PLAN', `${path} is not valid JSON (${(error as Error).message})`, { hint: 'write the plan again with sonde cluster plan … --force' });
  }
  const v = (typeof value === 'object' && value !== null ? value : {}) as Partial<ClusterPlan>;
  if (v.kind !== PLAN_KIND) throw new UsageError('E_CLUSTER_PLAN', `${path} is not a Sonde cluster plan`);
  if (v.version !== PLAN_VERSION) throw new UsageError('E_CLUSTER_PLAN', `${path} has plan version ${JSON.stringify(v.version)}; this Sonde reads ${PLAN_VERSION}`, { hint: 'write the plan again with this Sonde' });
  if (!Number.isSafeInteger(v.tasks) || (v.tasks ?? 0) < 1 || typeof v.run !== 'string' || typeof v.result !== 'string' || typeof v.job !== 'object' || v.job === null || typeof v.scripts !== 'object') {
    throw new UsageError('E_CLUSTER_PLAN', `${path} is damaged (tasks, run, result, job or scripts missing or of the wrong type)`, { hint: 'write the plan again with sonde cluster plan … --force' });
  }
  return v as ClusterPlan;
}

/** Whether RUN already holds a plan of exactly this job and N (writing it again is then harmless). */
function sameJobPlanned(run: string, job: JobLine, tasks: number): boolean {
  const plan = readPlanIfAny(run);
  return plan !== null && plan.tasks === tasks && JSON.stringify(plan.job) === JSON.stringify(job);
}

function prepareRunFolder(run: string, job: JobLine, tasks: number, force: boolean): void {
  if (existsSync(run)) {
    if (!statSync(run).isDirectory()) throw new UsageError('E_CLUSTER_PLAN', `run folder ${run} exists and is not a folder`);
    const foreign = readdirSync(run).filter((name) => !RUN_ENTRIES.has(name)).sort();
    if (foreign.length > 0) throw new UsageError('E_CLUSTER_PLAN', `run folder ${run} holds files a plan does not write (${foreign.slice(0, 10).join(', ')}); refusing to use it`, { hint: 'choose a new or empty folder for the run' });
    if (!force && existsSync(join(run, PLAN_FILE)) && !sameJobPlanned(run, job, tasks)) {
      throw new UsageError('E_CLUSTER_PLAN', `run folder ${run} holds the plan of another job or another number of tasks; its shards would not fit this one`, { hint: 'choose a new run folder, or pass --force (then remove its shards/ first)' });
    }
  } else {
    try {
      mkdirSync(run, { recursive: true });
    } catch (error) {
      throw new RuntimeFailure('E_CLUSTER_PLAN', `cannot create run folder ${run} (${(error as NodeJS.ErrnoException).code ?? (error as Error).message})`);
    }
  }
}

/** A folder `--out NAME` (record, sweep) without a slash goes under snapshots/ (as resolveOutFolder does), relative to `cwd`. */
function outFolder(out: string, cwd: string): string {
  if (out.trim() === '') throw new UsageError('E_CLUSTER_JOB', '--out in the job is empty', { hint: 'name a folder, e.g. --out base' });
  return resolve(cwd, out.includes('/') || out.includes('\\') ? out : join(DEFAULT_SNAPSHOT_PARENT, out));
}

/** Stimuli of a snapshot per its manifest, or null when it cannot be read (the task will say why). */
function stimulusCount(folder: string): number | null {
  const count = manifestOf(folder)?.stimuli?.count;
  return typeof count === 'number' && Number.isSafeInteger(count) ? count : null;
}

/**
 * Stimuli a record job lists, or null when the listing cannot be read here (the task then says why).
 * Only the listing is read (ids and labels), not the images.
 */
function listedStimuli(path: string, labels: string | undefined, at: (path: string) => string): number | null {
  try {
    // an array's stimuli are its first axis (its header alone says so); a folder or CSV is listed
    if (path.toLowerCase().endsWith('.npy')) return readNpyHeader(path).shape[0] ?? null;
    const preprocessing = { size: [1, 1] as [number, number], mean: [0, 0, 0], std: [1, 1, 1], bgr: false };
    return openStimulusSource(path, { preprocessing, channels: 3, ...(labels !== undefined ? { labelsFile: labels === 'none' || labels === 'folders' ? labels : at(labels) } : {}) }).count;
  } catch {
    return null;
  }
}

/** The few manifest fields a plan looks at, or null when the manifest cannot be read. */
function manifestOf(folder: string): { stimuli?: { count?: number }; run?: { batch?: number } } | null {
  try {
    const value = parseJson(readFileSync(join(folder, 'manifest.json'), 'utf8'));
    return typeof value === 'object' && value !== null ? (value as { stimuli?: { count?: number }; run?: { batch?: number } }) : null;
  } catch {
    return null;
  }
}

/** The memory estimate of one task (task-memory.ts) from the model the job loads, if any. */
async function estimateMemory(job: JobLine, at: (path: string) => string): Promise<number> {
  if (job.kind === 'diff' || job.kind === 'tune') return estimateTaskMemoryMib({ modelBytes: 0, elementsPerStimulus: 0, rows: 0 }) + 1024;
  const inputShape = optionValue(job, '--input-shape');
  const inspection = await inspectModel(at(job.positionals[0]!), inputShape ? { inputShape: inputShape.split('x').map(Number) } : {});
  const elements = inspection.layers.reduce((sum, layer) => sum + layer.elements, 0);
  const batch = Number(optionValue(job, '--batch') ?? 16);
  const vectors = Number(optionValue(job, '--vectors') ?? 16);
  // a sweep runs `vectors` gain vectors per call over one batch of the baseline (its recorded batch size)
  const from = optionValue(job, '--from');
  const baselineBatch = (from !== undefined ? manifestOf(at(from))?.run?.batch : undefined) ?? 16;
  const rows = job.kind === 'sweep' ? vectors * baselineBatch : Number.isFinite(batch) && batch > 0 ? batch : 16;
  return estimateTaskMemoryMib({ modelBytes: 4 * inspection.model.parameterCount, elementsPerStimulus: elements, rows });
}
