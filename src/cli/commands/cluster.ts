/**
 * `sonde cluster plan|submit|status`: Slurm job arrays over shards of record, sense, diff, tune and
 * sweep, a merge job after them, and the state of a run read from its folders (see src/cluster/).
 */
import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { planClusterRun, readClusterPlan } from '../../cluster/plan.js';
import { clusterRunStatus } from '../../cluster/status.js';
import { arraySpec, parseTaskList, submitClusterRun, type Submission } from '../../cluster/submit.js';
import { shellQuote } from '../../cluster/batch-script.js';
import type { ClusterPlan } from '../../cluster/plan-types.js';
import { positiveInteger } from '../options.js';
import { cliIo } from '../io.js';

interface PlanCliOptions {
  tasks: number;
  cpus: number;
  mem: string;
  time?: string;
  partition?: string;
  account?: string;
  sbatch: string[];
  sonde?: string;
  submit?: boolean;
  after: string[];
  force?: boolean;
  json?: boolean;
}

const collect = (value: string, previous: string[]): string[] => [...previous, value];

/** The lines that say what was submitted. */
function submittedLine(submission: Submission, plan: ClusterPlan): string {
  return `submitted array job ${submission.array} (tasks ${arraySpec(submission.tasks)} of ${plan.tasks})${submission.merge ? ` and merge job ${submission.merge} (after ${submission.array})` : ''}; logs in ${plan.run}/logs/, progress: sonde cluster status ${shellQuote(plan.run)}\n`;
}

/** Registers `sonde cluster`. */
export function registerCluster(program: Command): void {
  const cluster = program.command('cluster').description('split a command over the tasks of a Slurm job array, merge the shards, and see what is done');

  cluster
    .command('plan')
    .description('write a Slurm job array (task K: shard K of N) and a merge job for a record, sense, diff, tune or sweep command given after --')
    .argument('<run>', 'run folder: plan.json, array.sbatch, merge.sbatch, shards/, logs/ (on a file system every node sees)')
    .argument('<job...>', 'after --: the command to split, e.g. -- record model.onnx --stimuli displays/ --out base')
    .requiredOption('--tasks <n>', 'N: array tasks, each one shard of the stimuli (sweep: of the cells)', positiveInteger)
    .option('--cpus <n>', 'CPUs per task (--cpus-per-task), also the runtime threads', positiveInteger, 4)
    .option('--mem <size>', 'memory per task: auto (estimated from the model) or a size like 8G', 'auto')
    .option('--time <limit>', 'time limit per task (Slurm --time, e.g. 04:00:00)')
    .option('--partition <name>', 'Slurm partition')
    .option('--account <name>', 'Slurm account')
    .option('--sbatch <arg>', 'a further #SBATCH option for both scripts, e.g. --qos=long (repeatable)', collect, [])
    .option('--sonde <command>', 'how the nodes run Sonde (default: this node and this installation\'s bin/sonde)')
    .option('--submit', 'also submit the array and the merge job with sbatch')
    .option('--after <jobid>', 'with --submit: the array waits for this job (e.g. the baseline\'s array) to succeed (repeatable)', collect, [])
    .option('--force', 'replace another plan in the run folder, and let the merge replace an existing result')
    .option('--json', 'print the plan (and the job ids) as JSON')
    .action(async (run: string, job: string[], opts: PlanCliOptions) => {
      const io = cliIo();
      if (opts.after.length > 0 && !opts.submit) throw new UsageError('E_CLUSTER_PLAN', '--after needs --submit (it is a dependency of the submitted array)');
      const plan = await planClusterRun({
        run,
        tasks: opts.tasks,
        job,
        cpus: opts.cpus,
        memory: opts.mem,
        ...(opts.time !== undefined ? { time: opts.time } : {}),
        ...(opts.partition !== undefined ? { partition: opts.partition } : {}),
        ...(opts.account !== undefined ? { account: opts.account } : {}),
        sbatchArgs: opts.sbatch,
        ...(opts.sonde !== undefined ? { sonde: opts.sonde.trim().split(/\s+/) } : {}),
        ...(opts.force ? { force: true } : {}),
      });
      const submission = opts.submit ? submitClusterRun(plan, { after: opts.after }) : null;
      if (opts.json) {
        io.stdout(`${JSON.stringify({ plan, submitted: submission }, null, 2)}\n`);
        return;
      }
      const r = plan.resources;
      io.stdout(
        `wrote a plan for \`sonde ${plan.job.kind}\` over ${plan.tasks} tasks in ${plan.run}:\n` +
          `  ${plan.scripts.array}: tasks 1-${plan.tasks}, ${r.cpus} CPU${r.cpus === 1 ? '' : 's'} and ${r.memoryMib} MiB each (${r.memorySource === 'estimate' ? 'estimated from the model; --mem to set' : 'as given'})${r.time ? `, ${r.time}` : ''}; logs ${plan.run}/logs/task-K.log\n` +
          `  ${plan.scripts.merge}: joins the shards into ${plan.result}\n`,
      );
      if (submission) io.stdout(submittedLine(submission, plan));
      else io.stdout(`submit with: sonde cluster submit ${shellQuote(plan.run)}\n   or: jobid=$(sbatch --parsable ${shellQuote(plan.scripts.array)}) && sbatch --dependency=afterok:$jobid ${shellQuote(plan.scripts.merge)}\n`);
    });

  cluster
    .command('submit')
    .description('submit a planned run with sbatch: the array (or only some tasks), then the merge job after it')
    .argument('<run>', 'run folder written by sonde cluster plan')
    .option('--only <tasks>', 'only these tasks, e.g. 3,7,10-12 (what cluster status lists as not done)')
    .option('--after <jobid>', 'the array waits for this job to succeed (repeatable)', collect, [])
    .option('--no-merge', 'submit the array only')
    .option('--json', 'print the job ids as JSON')
    .action((run: string, opts: { only?: string; after: string[]; merge: boolean; json?: boolean }) => {
      const io = cliIo();
      const plan = readClusterPlan(run);
      const submission = submitClusterRun(plan, { after: opts.after, ...(opts.only !== undefined ? { only: parseTaskList(opts.only, plan.tasks) } : {}), ...(opts.merge ? {} : { noMerge: true }) });
      io.stdout(opts.json ? `${JSON.stringify(submission)}\n` : submittedLine(submission, plan));
    });

  cluster
    .command('status')
    .description('which shards of a run are done, partial or missing (from the run folder alone), and the command that reruns the rest')
    .argument('<run>', 'run folder written by sonde cluster plan')
    .option('--json', 'print the status as JSON')
    .action((run: string, opts: { json?: boolean }) => {
      const io = cliIo();
      const status = clusterRunStatus(readClusterPlan(run));
      if (opts.json) {
        io.stdout(`${JSON.stringify(status, null, 2)}\n`);
        return;
      }
      const { done, partial, missing } = status.counts;
      io.stdout(`${status.run}: \`sonde ${status.kind}\` in ${status.tasks} shards: ${done} done, ${partial} partial, ${missing} missing; result ${status.result.path} ${status.result.done ? 'written' : 'not written yet'}\n`);
      const open = status.shards.filter((s) => s.state !== 'done');
      for (const s of open.slice(0, 30)) io.stdout(`  ${s.state === 'partial' ? '…' : '✗'} shard ${s.task}: ${s.state}, ${s.detail} (${s.path})\n`);
      if (open.length > 30) io.stdout(`  … and ${open.length - 30} more (--json lists every shard)\n`);
      if (status.rerun) io.stdout(`rerun the ${status.rerun.tasks.length} unfinished task${status.rerun.tasks.length === 1 ? '' : 's'} (partial ones continue where they stopped):\n  ${status.rerun.sonde}\n  or: ${status.rerun.sbatch}\n`);
      else if (!status.result.done) io.stdout(`every shard is done; merge with: sbatch ${shellQuote(status.run)}/merge.sbatch   (or run it here: bash ${shellQuote(status.run)}/merge.sbatch)\n`);
    });
}
