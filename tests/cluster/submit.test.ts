/**
 * parseTaskList, arraySpec, submitClusterRun: task lists in Slurm's --array syntax (ranges of
 * consecutive tasks, as the sbatch manual writes them, e.g. --array=1-3,7), and the one-line failure
 * when sbatch is not there. Submission to a real scheduler: tests/cluster/slurm-run.test.ts.
 */
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { planClusterRun } from '../../src/cluster/plan.js';
import { arraySpec, parseTaskList, submitClusterRun } from '../../src/cluster/submit.js';
import { tempFolder } from '../helpers/onnx-builder.js';

describe('parseTaskList', () => {
  it('parseTaskList(text, n) reads lists and ranges, sorted and without repeats', () => {
    expect(parseTaskList('3,1,2', 5)).toEqual([1, 2, 3]);
    expect(parseTaskList('2-4, 4 ,9-10', 10)).toEqual([2, 3, 4, 9, 10]);
    expect(() => parseTaskList('0', 5)).toThrow(/not a task or range within 1\.\.5/);
    expect(() => parseTaskList('4-2', 5)).toThrow(/"4-2"/);
    expect(() => parseTaskList('6', 5)).toThrow(/within 1\.\.5/);
    expect(() => parseTaskList('a', 5)).toThrow(/--only "a"/);
  });
});

describe('arraySpec', () => {
  it('arraySpec(tasks) is the inverse of parseTaskList (exact round trip)', () => {
    expect(arraySpec([1, 2, 3, 7, 9, 10])).toBe('1-3,7,9-10');
    expect(arraySpec([5])).toBe('5');
    for (const tasks of [[1], [1, 3, 5], [2, 3, 4, 5], [1, 2, 4, 5, 7, 100]]) expect(parseTaskList(arraySpec(tasks), 100)).toEqual(tasks);
  });
});

describe('submitClusterRun', () => {
  it('submitClusterRun(plan) without sbatch says so and how to submit by hand', async () => {
    const dir = tempFolder('sonde-submit-');
    const plan = await planClusterRun({ run: join(dir, 'run'), tasks: 2, job: ['diff', join(dir, 'a'), join(dir, 'b')], memory: '1G' });
    expect(() => submitClusterRun(plan, { sbatch: join(dir, 'no-such-sbatch') })).toThrow(/cannot run .*no-such-sbatch \(ENOENT\)/);
    expect(() => submitClusterRun(plan, { after: ['12; rm'] })).toThrow(/--after "12; rm" is not a Slurm job id/);
  });
});
