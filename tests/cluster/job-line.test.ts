/**
 * parseJobLine: the words after `--` of `cluster plan`, scanned into command, positionals and options.
 * The flags table (JOB_FLAGS) is checked against the real commander program (exact property: an option
 * the CLI parses without a value is a flag here, and no other), so a new flag cannot be misread as
 * taking the next word.
 */
import { describe, expect, it } from 'vitest';
import { CLUSTER_KINDS, JOB_FLAGS, optionValue, parseJobLine } from '../../src/cluster/job-line.js';
import { createProgram } from '../../src/cli/program.js';

describe('parseJobLine', () => {
  it('JOB_FLAGS lists exactly the options each command parses without a value', () => {
    const program = createProgram();
    for (const kind of CLUSTER_KINDS) {
      const command = program.commands.find((c) => c.name() === kind)!;
      const flags = command.options.filter((o) => !o.required && !o.optional).map((o) => o.long!).sort();
      expect(flags, kind).toEqual([...JOB_FLAGS[kind]].sort());
    }
  });

  it('parseJobLine(words) splits positionals, options and --out', () => {
    const job = parseJobLine(['record', 'm.onnx', '--stimuli', 'd/', '--bgr', '--batch=8', '--layers', 'all', '--out', 'base']);
    expect(job).toEqual({
      kind: 'record',
      positionals: ['m.onnx'],
      options: [{ name: '--stimuli', value: 'd/' }, { name: '--bgr', value: null }, { name: '--batch', value: '8' }, { name: '--layers', value: 'all' }],
      out: 'base',
    });
    expect(optionValue(job, '--batch')).toBe('8');
    expect(parseJobLine(['diff', 'a', 'b', '--task', 'labels']).out).toBeNull();
    // a value that starts with a dash is still the option's value
    expect(parseJobLine(['sweep', 'm.onnx', '--strengths', '-0.5,0', '--out', 'o']).options[0]).toEqual({ name: '--strengths', value: '-0.5,0' });
  });

  it('parseJobLine(words) refuses what the plan sets or cannot split, naming it', () => {
    expect(() => parseJobLine([])).toThrow(/needs the Sonde command to split after --/);
    expect(() => parseJobLine(['sonde', 'record'])).toThrow(/cannot split "sonde"/);
    expect(() => parseJobLine(['check', 'x'])).toThrow(/cannot split "check" \(it splits record, sense, diff, tune, sweep\)/);
    expect(() => parseJobLine(['diff', 'a'])).toThrow(/diff in a cluster plan takes BASELINE MODULATED/);
    expect(() => parseJobLine(['record', 'm.onnx', '--shard', '1/2', '--out', 'o'])).toThrow(/--shard is set by the plan/);
    expect(() => parseJobLine(['record', 'm.onnx', '--threads=2', '--out', 'o'])).toThrow(/--threads is set by the plan/);
    expect(() => parseJobLine(['sweep', 'm.onnx', '--restart', '--out', 'o'])).toThrow(/--restart is set by the plan/);
    expect(() => parseJobLine(['record', 'm.onnx', '--stimuli', 'd'])).toThrow(/record job needs --out/);
    expect(() => parseJobLine(['record', 'm.onnx', '--out'])).toThrow(/--out needs a value/);
    expect(() => parseJobLine(['diff', 'a', 'b', '--out', 'x'])).toThrow(/--out is not a diff option/);
    expect(() => parseJobLine(['record', 'm.onnx', '--from', 'b', '--out', 'o'])).toThrow(/--from needs --modulate/);
    expect(() => parseJobLine(['tune', 's', '--out', 't.arrow', 'stray'])).toThrow(/"stray" is not an option/);
  });
});
