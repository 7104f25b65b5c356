/**
 * Terminal output fits the terminal: with COLUMNS=80 (and 120), every line that `demo`, `diff` (with a
 * tuning table: the widest layer table, and the task table), `tune --against` and `sweep` (eleven
 * strengths, four schemes) print is at most that many terminal cells wide (string-width, the measure
 * cli-table3 uses; exact property of the output). Run on the quick demo's own snapshots, in process.
 */
import { join } from 'node:path';
import stringWidth from 'string-width';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { DEMO_MODEL } from '../../src/demo/demo.js';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';

const previous = process.env['COLUMNS'];
let demo: { code: number; stdout: string; stderr: string };
let folder: string;

function overlong(text: string, width: number): string[] {
  return text.split('\n').filter((line) => stringWidth(line) > width);
}

describe('terminal output at 80 and 120 columns', () => {
  beforeAll(async () => {
    process.env['COLUMNS'] = '80';
    folder = join(tempFolder(), 'demo');
    demo = await runSonde(['demo', '--quick', '--out', folder, '--threads', '1']);
  }, 400_000);
  afterAll(() => {
    if (previous === undefined) delete process.env['COLUMNS'];
    else process.env['COLUMNS'] = previous;
  });

  it('sonde demo at 80 columns: every line fits, and the last lines are the finding and the one-line caveat', () => {
    expect(demo.code).toBe(0);
    expect(overlong(demo.stdout, 80)).toEqual([]);
    const tail = demo.stdout.trimEnd().split('\n').slice(-8).join('\n');
    expect(tail).toMatch(/Finding: Of the schemes scaled to 20 % modulation size/);
    expect(tail).toMatch(/95 % CI/);
    expect(tail).toMatch(/not evidence about\s+brains/);
    // full tensor names are not repeated in the bullets (short labels, full names once in a legend line)
    expect((demo.stdout.match(/\/conv1\/relu\/Relu_output_0/g) ?? []).length).toBeLessThanOrEqual(2);
  });

  for (const width of [80, 120]) {
    it(`sonde diff, tune --against and sweep at ${width} columns: every line fits`, async () => {
      process.env['COLUMNS'] = String(width);
      const diff = await runSonde(['diff', join(folder, 'baseline-heldout'), join(folder, 'modulated-early'), '--task', 'detect:disc,ring,cross', '--tuning', join(folder, 'tuning.arrow'), '--target', 'disc', '--bootstrap', '50']);
      expect(diff.code, diff.stderr).toBe(0);
      expect(overlong(diff.stdout, width)).toEqual([]);
      expect(diff.stdout).toMatch(/◆ site conv1\/Relu = \/conv1\/relu\/Relu_output_0/);
      const vs = await runSonde(['diff', join(folder, 'baseline-heldout'), join(folder, 'modulated-early'), '--vs', join(folder, 'modulated-late'), '--task', 'detect:disc', '--bootstrap', '20']);
      expect(vs.code, vs.stderr).toBe(0);
      expect(overlong(vs.stdout, width)).toEqual([]);
      const windowed = await runSonde(['diff', join(folder, 'baseline-heldout'), join(folder, 'modulated-window'), '--task', 'detect:disc', '--bootstrap', '20']);
      expect(windowed.code, windowed.stderr).toBe(0);
      expect(overlong(windowed.stdout, width)).toEqual([]);
      expect(windowed.stdout).toMatch(/spatial profile: relative change by distance from the window centre/);
      const tune = await runSonde(['tune', join(folder, 'tuning.arrow'), '--against', join(folder, 'sensitivity.arrow')]);
      expect(tune.code, tune.stderr).toBe(0);
      expect(overlong(tune.stdout, width)).toEqual([]);
      expect(tune.stdout).toMatch(/r crescent/);
      const sweep = await runSonde(['sweep', DEMO_MODEL, '--from', join(folder, 'baseline-heldout'), '--sites', '/conv7/relu/Relu_output_0', '--strengths', '0:1:0.1', '--task', 'detect:disc,ring', '--tuning', join(folder, 'tuning.arrow'), '--sensitivity', join(folder, 'sensitivity.arrow'), '--control-seeds', '1', '--match', 'auc:+0.05', '--out', join(folder, `sweep-${width}`), '--threads', '1']);
      expect(sweep.code, sweep.stderr).toBe(0);
      expect(overlong(sweep.stdout, width)).toEqual([]);
      expect(sweep.stdout).toMatch(/β=0\.9/);
    }, 300_000);
  }
});
