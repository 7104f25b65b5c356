/**
 * The two Slurm batch scripts of a cluster plan, as text: the job array (task K runs shard K of N of the
 * job) and the merge job that joins the shards once every task succeeded. Both are plain bash with
 * `#SBATCH` lines, readable and editable by hand; every path and word of the job is single-quoted, so
 * spaces and shell characters in names pass through unchanged.
 *
 * Requeue safety: a task can be run again at any time (requeued after pre-emption or a node failure,
 * or resubmitted by hand) and ends with the same shard. A record task passes `--resume` (it continues
 * from its last checkpoint; a complete shard is left alone), a sweep task keeps the cells already in
 * its `cells.jsonl`, and a partial-statistics task (sense, diff, tune) is skipped when its file exists —
 * the file is written under a temporary name and renamed, so it exists only complete. The merge job
 * replaces only this plan's result.
 */
import type { ClusterPlan } from './plan-types.js';

/** Quotes one word for bash: `'…'`, with `'` written as `'\''`. */
export function shellQuote(word: string): string {
  return /^[A-Za-z0-9_./:=@%+,-]+$/.test(word) ? word : `'${word.replace(/'/g, `'\\''`)}'`;
}

/** The `#SBATCH` lines both scripts share. */
function commonDirectives(plan: ClusterPlan, name: string, log: string): string[] {
  return [
    `#SBATCH --job-name=${shellQuote(name)}`,
    `#SBATCH --cpus-per-task=${plan.resources.cpus}`,
    `#SBATCH --mem=${plan.resources.memoryMib}M`,
    ...(plan.resources.time ? [`#SBATCH --time=${shellQuote(plan.resources.time)}`] : []),
    ...(plan.resources.partition ? [`#SBATCH --partition=${shellQuote(plan.resources.partition)}`] : []),
    ...(plan.resources.account ? [`#SBATCH --account=${shellQuote(plan.resources.account)}`] : []),
    `#SBATCH --chdir=${shellQuote(plan.cwd)}`,
    `#SBATCH --output=${shellQuote(log)}`,
    '#SBATCH --open-mode=append',
    '#SBATCH --requeue',
    ...plan.resources.extra.map((arg) => `#SBATCH ${arg}`),
  ];
}

/** The job's words with `--from` swapped for the baseline run's shard (modulated record). */
function jobWords(plan: ClusterPlan, fromShard: string | null): string {
  const words = [plan.job.kind, ...plan.job.positionals.map(shellQuote)];
  for (const option of plan.job.options) {
    if (option.name === '--from' && fromShard !== null) words.push('--from', fromShard);
    else words.push(option.value === null ? option.name : `${option.name}=${shellQuote(option.value)}`);
  }
  return words.join(' ');
}

/** The array script: task K of N runs shard K. */
export function arrayScript(plan: ClusterPlan): string {
  const n = plan.tasks;
  const kind = plan.job.kind;
  const lines = [
    '#!/bin/bash',
    `# Task K of ${n}: shard K/${n} of \`sonde ${kind}\`, written by \`sonde cluster plan\` (Sonde ${plan.sondeVersion}) on ${plan.created}.`,
    '# Safe to run again (requeue, pre-emption, resubmission): the task ends with the same shard.',
    `# Rerun some tasks: sbatch --array=3,7 ${shellQuote(plan.scripts.array)}   (or: sonde cluster status ${shellQuote(plan.run)})`,
    ...commonDirectives(plan, `sonde-${kind}`, `${plan.run}/logs/task-%a.log`),
    `#SBATCH --array=1-${n}`,
    'set -euo pipefail',
    'K="${SLURM_ARRAY_TASK_ID:?submit this script with sbatch: it is a job array (task K does shard K)}"',
    `N=${n}`,
    `RUN=${shellQuote(plan.run)}`,
    `THREADS="\${SLURM_CPUS_PER_TASK:-${plan.resources.cpus}}"`,
    `SONDE=(${plan.sonde.map(shellQuote).join(' ')})`,
    'echo "sonde cluster: task $K/$N on $(hostname), job ${SLURM_JOB_ID:-?}, restart ${SLURM_RESTART_COUNT:-0}, $(date -u +%FT%TZ)"',
  ];
  const from = plan.baselineRun !== null ? `"\${BASELINE_RUN}/shards/$K"` : null;
  if (plan.baselineRun !== null) lines.push(`BASELINE_RUN=${shellQuote(plan.baselineRun)}`);
  const job = jobWords(plan, from);
  switch (kind) {
    case 'record':
      lines.push(`"\${SONDE[@]}" ${job} --out "$RUN/shards/$K" --shard "$K/$N" --resume --threads "$THREADS"`);
      break;
    case 'sweep':
      lines.push(`"\${SONDE[@]}" ${job} --out "$RUN/shards/$K" --shard "$K/$N" --threads "$THREADS"`);
      break;
    default: {
      const threads = kind === 'sense' ? ' --threads "$THREADS"' : '';
      lines.push(
        'PART="$RUN/shards/$K.json"',
        'if [ -s "$PART" ]; then echo "sonde cluster: $PART is already written; nothing to do"; exit 0; fi',
        `"\${SONDE[@]}" ${job} --shard "$K/$N" --partial "$PART"${threads}`,
      );
    }
  }
  lines.push('echo "sonde cluster: task $K/$N finished $(date -u +%FT%TZ)"', '');
  return lines.join('\n');
}

/** The merge script: joins the N shards into the result, after the whole array succeeded. */
export function mergeScript(plan: ClusterPlan): string {
  const kind = plan.job.kind;
  const lines = [
    '#!/bin/bash',
    `# Joins the ${plan.tasks} shards of \`sonde ${kind}\` (${shellQuote(plan.scripts.array)}) into the result; written by \`sonde cluster plan\`.`,
    `# Submit after the array: sbatch --dependency=afterok:ARRAY_JOB_ID ${shellQuote(plan.scripts.merge)}`,
    ...commonDirectives(plan, `sonde-${kind}-merge`, `${plan.run}/logs/merge.log`),
    'set -euo pipefail',
    `N=${plan.tasks}`,
    `RUN=${shellQuote(plan.run)}`,
    `THREADS="\${SLURM_CPUS_PER_TASK:-${plan.resources.cpus}}"`,
    `SONDE=(${plan.sonde.map(shellQuote).join(' ')})`,
    'echo "sonde cluster: merging $N shards on $(hostname), job ${SLURM_JOB_ID:-?}, $(date -u +%FT%TZ)"',
    'PARTS=()',
    `for K in $(seq 1 "$N"); do PARTS+=("$RUN/shards/$K${kind === 'record' || kind === 'sweep' ? '' : '.json'}"); done`,
  ];
  const out = plan.result;
  switch (kind) {
    case 'record':
      lines.push(
        `"\${SONDE[@]}" merge "\${PARTS[@]}" --out ${shellQuote(out)} --force${plan.baselineResult !== null ? ` --baseline ${shellQuote(plan.baselineResult)}` : ''}`,
        `"\${SONDE[@]}" check ${shellQuote(out)}`,
      );
      break;
    case 'sweep':
      // every shard's cell log, concatenated, is a finished sweep's log: the sweep below only summarises
      lines.push(
        `mkdir -p ${shellQuote(out)}`,
        'LOGS=(); for P in "${PARTS[@]}"; do LOGS+=("$P/cells.jsonl"); done',
        'cat "${LOGS[@]}" > "$RUN/cells.jsonl.partial"',
        `mv -f "$RUN/cells.jsonl.partial" ${shellQuote(`${out}/cells.jsonl`)}`,
        `"\${SONDE[@]}" ${jobWords(plan, null)} --out ${shellQuote(out)} --threads "$THREADS"`,
      );
      break;
    case 'diff':
      lines.push('"${SONDE[@]}" merge "${PARTS[@]}" --json > "$RUN/result.json.partial"', 'mv -f "$RUN/result.json.partial" "$RUN/result.json"');
      break;
    default:
      lines.push(`"\${SONDE[@]}" merge "\${PARTS[@]}" --out ${shellQuote(out)} --force`);
  }
  lines.push(`echo "sonde cluster: merged into ${out.replace(/["\\$`]/g, '\\$&')} $(date -u +%FT%TZ)"`, '');
  return lines.join('\n');
}
