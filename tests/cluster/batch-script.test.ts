/**
 * shellQuote, arrayScript, mergeScript: the words bash receives are exactly the words given (checked by
 * running bash itself — the reference for its own quoting rules), and the scripts pass `bash -n`.
 */
import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import { arrayScript, mergeScript, shellQuote } from '../../src/cluster/batch-script.js';
import type { ClusterPlan } from '../../src/cluster/plan-types.js';
import { parseJobLine } from '../../src/cluster/job-line.js';

const HOSTILE = ['plain', 'with space', "it's", '"double"', '$HOME', '`date`', '$(rm -rf /)', 'a\\b', 'semi;colon', 'new\nline', '*', '', '--x=y z', 'ünïcødé', '!bang', '#hash'];

function plan(words: string[], extra: Partial<ClusterPlan> = {}): ClusterPlan {
  return {
    kind: 'sonde.cluster-plan', version: 1, created: '2026-01-01T00:00:00.000Z', sondeVersion: '0', run: "/data/run 'a'", cwd: '/data/work dir', tasks: 4,
    job: parseJobLine(words), result: '/data/out $1', baselineRun: null, baselineResult: null,
    resources: { cpus: 2, memoryMib: 1024, memorySource: 'given', time: '01:00:00', partition: 'short', account: null, extra: ['--qos=low'] },
    sonde: ['/usr/bin/node', '/opt/so nde/bin/sonde'], scripts: { array: "/data/run 'a'/array.sbatch", merge: "/data/run 'a'/merge.sbatch" }, ...extra,
  };
}

describe('shellQuote', () => {
  it('shellQuote(word) reaches bash as the same word, for quotes, expansions, newlines and empty words', () => {
    const script = `printf '%s\\0' ${HOSTILE.map(shellQuote).join(' ')}`;
    const out = spawnSync('bash', ['-c', script], { encoding: 'utf8' });
    expect(out.status).toBe(0);
    expect(out.stdout.split('\0').slice(0, -1)).toEqual(HOSTILE);
  });
});

describe('arrayScript', () => {
  it('arrayScript(plan) is valid bash with the directives and one shard per task', () => {
    const text = arrayScript(plan(['record', 'm $x.onnx', '--stimuli', "it's/", '--out', 'o']));
    expect(spawnSync('bash', ['-n'], { input: text }).status).toBe(0);
    for (const line of ['#SBATCH --array=1-4', '#SBATCH --cpus-per-task=2', '#SBATCH --mem=1024M', '#SBATCH --time=01:00:00', '#SBATCH --partition=short', '#SBATCH --requeue', '#SBATCH --qos=low', '#SBATCH --open-mode=append']) expect(text).toContain(line);
    expect(text).toContain(`#SBATCH --output='/data/run '\\''a'\\''/logs/task-%a.log'`);
    expect(text).toContain('--shard "$K/$N" --resume --threads "$THREADS"');
    // the job's words survive: run the task line with SONDE replaced by printf
    const echoed = spawnSync('bash', ['-c', text.replace(/^SONDE=.*$/m, "SONDE=(printf '%s\\n')").replace(/^#SBATCH.*$/gm, '')], { encoding: 'utf8', env: { ...process.env, SLURM_ARRAY_TASK_ID: '3' } });
    expect(echoed.status, echoed.stderr).toBe(0);
    expect(echoed.stdout).toContain('m $x.onnx\n--stimuli=it\'s/\n');
    expect(echoed.stdout).toContain("--out\n/data/run 'a'/shards/3\n--shard\n3/4\n--resume\n--threads\n2\n");
  });

  it('arrayScript(plan) refuses to run outside an array and skips a written partial file', () => {
    const text = arrayScript(plan(['tune', 'snap', '--out', 't.arrow']));
    const outside = spawnSync('bash', ['-c', text], { encoding: 'utf8', env: { ...process.env, SLURM_ARRAY_TASK_ID: '' } });
    expect(outside.status).not.toBe(0);
    expect(outside.stderr).toMatch(/submit this script with sbatch/);
    expect(text).toContain('if [ -s "$PART" ]; then');
  });
});

describe('mergeScript', () => {
  it('mergeScript(plan) is valid bash for every kind', () => {
    for (const words of [['record', 'm', '--out', 'o'], ['sweep', 'm', '--from', 'b', '--out', 'o'], ['diff', 'a', 'b'], ['tune', 's', '--out', 't'], ['sense', 'm', '--from', 'b', '--out', 's']]) {
      const text = mergeScript(plan(words));
      expect(spawnSync('bash', ['-n'], { input: text }).status, words[0]).toBe(0);
      expect(text).toContain('--output=');
    }
    expect(mergeScript(plan(['record', 'm', '--out', 'o'], { baselineResult: '/b merged' }))).toContain("--baseline '/b merged'");
  });
});
