/**
 * The Sonde command a cluster plan splits over the tasks of a job array, read from the words after
 * `--` (`sonde cluster plan RUN --tasks 8 -- record model.onnx --stimuli displays/ --out base`).
 *
 * The words are not parsed by the command's own option parser (that lives in cli/, above this layer);
 * they are scanned: the command name first, then its positional arguments (model, snapshots) up to the
 * first `--option`, then options. An option's value is the next word unless the option is one of the
 * command's flags (`JOB_FLAGS`, checked against the CLI by its test), or `--name=value`. The plan takes out the options it sets per task (`--out`
 * becomes the merged result, `--shard`, `--partial`, `--resume`, `--threads` are its own) and refuses the
 * ones that cannot be split.
 */
import { UsageError } from '../errors.js';

/** Commands a plan can split, and what each task writes. */
export const CLUSTER_KINDS = ['record', 'sense', 'diff', 'tune', 'sweep'] as const;
export type ClusterKind = (typeof CLUSTER_KINDS)[number];

/** Options that take no value, per command (everything else takes one). */
export const JOB_FLAGS: Record<ClusterKind, ReadonlySet<string>> = {
  record: new Set(['--bgr', '--force', '--full-run', '--resume']),
  sense: new Set(['--bgr', '--force', '--json']),
  diff: new Set(['--force', '--json', '--skip-sha256']),
  tune: new Set(['--force', '--json', '--single-label']),
  sweep: new Set(['--depth-profile', '--json', '--restart']),
};

/** Positional arguments each command takes, in order (for messages and for pairing). */
const POSITIONALS: Record<ClusterKind, readonly string[]> = {
  record: ['MODEL'],
  sense: ['MODEL'],
  diff: ['BASELINE', 'MODULATED'],
  tune: ['SNAPSHOT'],
  sweep: ['MODEL'],
};

/** Options the plan sets itself; giving them in the job is refused with the reason. */
const PLAN_OWNED: Record<string, string> = {
  '--shard': 'each task gets its own --shard K/N',
  '--partial': 'each task writes its partial statistics into the run folder',
  '--resume': 'every record task resumes its shard already',
  '--threads': 'runtime threads follow the task\'s CPUs (--cpus)',
  '--restart': 'a requeued sweep task must keep the cells it finished',
  '--force': 'the merge job replaces only what this plan wrote; give --force to `cluster plan` instead',
  '--vs': 'one modulated snapshot per plan',
  '--against': 'compare the merged tuning table afterwards',
  '--json': 'the merge job writes the JSON result into the run folder',
};

/** One option as given: its name and value (null for a flag). */
export interface JobOption {
  name: string;
  value: string | null;
}

/** The scanned job. */
export interface JobLine {
  kind: ClusterKind;
  /** Positional arguments (model, snapshots), as given. */
  positionals: string[];
  /** Options in the order given, without `--out`. */
  options: JobOption[];
  /** The `--out` value: where the merged result goes (null for diff, whose result is JSON in the run folder). */
  out: string | null;
}

/**
 * Scans the words of a job.
 * @param words the words after `--`.
 * @returns the job.
 * @throws UsageError for an unknown or missing command, missing positionals, an option the plan sets
 *   itself, a missing `--out` where one is needed, or an option without its value.
 */
export function parseJobLine(words: readonly string[]): JobLine {
  const [command, ...rest] = words;
  if (command === undefined) {
    throw new UsageError('E_CLUSTER_JOB', 'cluster plan needs the Sonde command to split after --', { hint: 'e.g. sonde cluster plan runs/base --tasks 8 -- record model.onnx --stimuli displays/ --out base' });
  }
  const kind = command === 'sonde' ? undefined : (CLUSTER_KINDS as readonly string[]).includes(command) ? (command as ClusterKind) : undefined;
  if (kind === undefined) {
    throw new UsageError('E_CLUSTER_JOB', `cluster plan cannot split ${JSON.stringify(command)} (it splits ${CLUSTER_KINDS.join(', ')})`, { hint: command === 'sonde' ? 'leave out the word "sonde": -- record model.onnx …' : 'give the command name right after --' });
  }
  const positionals: string[] = [];
  let i = 0;
  while (i < rest.length && !rest[i]!.startsWith('--')) positionals.push(rest[i++]!);
  const wanted = POSITIONALS[kind];
  if (positionals.length !== wanted.length) {
    throw new UsageError('E_CLUSTER_JOB', `${kind} in a cluster plan takes ${wanted.join(' ')} right after the command name, got ${positionals.length === 0 ? 'none' : positionals.map((p) => JSON.stringify(p)).join(' ')}`, { hint: `write: -- ${kind} ${wanted.join(' ')} --option value …` });
  }
  const options: JobOption[] = [];
  let out: string | null = null;
  for (; i < rest.length; i++) {
    const word = rest[i]!;
    if (!word.startsWith('--')) throw new UsageError('E_CLUSTER_JOB', `${kind} job: ${JSON.stringify(word)} is not an option and does not follow one that takes a value`, { hint: `positional arguments (${wanted.join(' ')}) go right after "${kind}"` });
    const eq = word.indexOf('=');
    const name = eq > 0 ? word.slice(0, eq) : word;
    const owned = PLAN_OWNED[name];
    if (owned !== undefined) throw new UsageError('E_CLUSTER_JOB', `${kind} job: ${name} is set by the plan (${owned})`, { hint: `remove ${name} from the words after --` });
    let value: string | null;
    if (eq > 0) value = word.slice(eq + 1);
    else if (JOB_FLAGS[kind].has(name)) value = null;
    else {
      value = rest[i + 1] ?? null;
      if (value === null) throw new UsageError('E_CLUSTER_JOB', `${kind} job: ${name} needs a value`);
      i++;
    }
    if (name === '--out') out = value;
    else options.push({ name, value });
  }
  if (kind === 'diff' && out !== null) throw new UsageError('E_CLUSTER_JOB', 'diff job: --out is not a diff option; the merged diff is written to RUN/result.json');
  if (kind !== 'diff' && out === null) {
    throw new UsageError('E_CLUSTER_JOB', `${kind} job needs --out (where the merged ${kind === 'record' ? 'snapshot' : kind === 'sweep' ? 'sweep folder' : 'table'} goes)`, { hint: `add --out ${kind === 'record' ? 'DIR' : kind === 'sweep' ? 'DIR' : 'FILE.arrow'} to the words after --` });
  }
  if (kind === 'record' && options.some((o) => o.name === '--from') && !options.some((o) => o.name === '--modulate')) {
    throw new UsageError('E_CLUSTER_JOB', 'record job: --from needs --modulate (a baseline is paired with a modulated run)');
  }
  return { kind, positionals, options, out };
}

/** The value of option `name`, or undefined. */
export function optionValue(job: JobLine, name: string): string | undefined {
  const found = job.options.find((o) => o.name === name);
  return found?.value ?? undefined;
}
