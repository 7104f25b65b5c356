import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import pl from 'nodejs-polars';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { sweepModulations, parseMatchTarget, parseSweepMeasure } from '../../src/replay/sweep.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let stim: { npy: string; labels: string };
const kinds = ['alpha', 'beta', 'gamma'];

beforeAll(async () => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 3 }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
  const labels = Array.from({ length: 30 }, (_, i) => [kinds[i % 3]!, ...(i % 5 === 0 ? [kinds[(i + 2) % 3]!] : [])].join(';'));
  stim = writeStimuliNpy(dir, [30, 3, 16, 16], 43, labels);
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base'), batch: 8, threads: 1 });
  await tuneSnapshot({ snapshot: join(dir, 'base'), out: join(dir, 'tuning.arrow') });
});

describe('sweepModulations', () => {
  it('sweepModulations at strength 0 reproduces the baseline read-out exactly for every scheme', async () => {
    const result = await sweepModulations({ model, from: join(dir, 'base'), sites: ['relu1'], strengths: [0, 0.5], task: 'detect:all', tuning: join(dir, 'tuning.arrow'), out: join(dir, 'sw0'), threads: 1, controlSeeds: 2 });
    const zero = result.cells.filter((c) => c.strength === 0);
    expect(zero.length).toBe(3 * (1 + 1 + 2)); // 3 categories × (tuning + uniform + 2 shuffled seeds)
    for (const cell of zero) {
      expect(cell.mod).toEqual(cell.base);
      // NaN where the baseline answers the same for every display at the threshold (no d′ there, as in diff)
      expect(cell.change.dPrime).toBe(Number.isNaN(cell.base.dPrime) ? Number.NaN : 0);
      expect(cell.change.auc).toBe(0);
      expect(cell.change.matchedHitRatePp).toBe(0);
      // no change in false alarms: the criterion-only control is the baseline itself
      expect(cell.criterionControl).toEqual({ shift: 0, hitRatePp: 0, dPrime: Number.isNaN(cell.base.dPrime) ? Number.NaN : 0 });
      expect(cell.siteActivityChange).toBe(0);
      // every resample reproduces the baseline too: a zero-width interval at 0
      expect(cell.change.aucCi).toEqual([0, 0]);
    }
    expect(result.schemes).toEqual(['tuning', 'uniform', 'shuffled']);
    // verdicts rank by the threshold-free measure by default and say so
    expect(result.measure).toBe('auc');
    expect(result.control!.measure).toBe('auc');
    expect(result.summary).toMatch(/by ROC area \(threshold-free\)/);
    // the best cell is never strength 0, and only a mean whose 95 % interval lies above 0 (else "none")
    for (const best of result.best) {
      if (best.scheme === 'none') {
        expect(best.strength).toBeNaN();
        continue;
      }
      expect(best.strength).not.toBe(0);
      expect(best.ci![0]).toBeGreaterThan(0);
    }
    for (const cell of result.cells.filter((c) => c.strength !== 0)) {
      expect(cell.change.aucCi![0]).toBeLessThanOrEqual(cell.change.auc + 1e-9);
      expect(cell.change.aucCi![1]).toBeGreaterThanOrEqual(cell.change.auc - 1e-9);
    }
    // the control in d′ is the mean Δd′ of the tuning cells at non-zero strength (one site, so a plain mean per category)
    const byDPrime = await sweepModulations({ model, from: join(dir, 'base'), sites: ['relu1'], strengths: [0, 0.5], task: 'detect:all', tuning: join(dir, 'tuning.arrow'), out: join(dir, 'sw0-dprime'), threads: 1, controlSeeds: 2, measure: 'dprime', threshold: 'best' });
    expect(byDPrime.control!.measure).toBe('dprime');
    const tuned = byDPrime.cells.filter((c) => c.scheme === 'tuning' && c.strength !== 0 && Number.isFinite(c.change.dPrime));
    expect(byDPrime.control!.meanTuning).toBeCloseTo(tuned.reduce((a, c) => a + c.change.dPrime, 0) / tuned.length, 12);
    const tunedAuc = result.cells.filter((c) => c.scheme === 'tuning' && c.strength !== 0);
    expect(result.control!.meanTuning).toBeCloseTo(tunedAuc.reduce((a, c) => a + c.change.auc, 0) / tunedAuc.length, 12);
    expect(byDPrime.summary).toMatch(/by d′ at the fixed threshold/);
  });

  it('sweepModulations cells equal a recorded modulated run diffed against the baseline (same gains, same read-out)', async () => {
    const result = await sweepModulations({ model, from: join(dir, 'base'), sites: ['relu1'], schemes: ['tuning'], strengths: [0.8], task: 'detect:beta', tuning: join(dir, 'tuning.arrow'), out: join(dir, 'sw1'), threads: 1, depthProfile: true });
    const cell = result.cells[0]!;
    const spec = join(dir, 'tuning-spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu1', kind: 'tuning', target: 'beta', strength: 0.8 }));
    const mod = await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'mod-tuning'), modulate: spec, from: join(dir, 'base'), tables: (await import('../../src/replay/modulation-tables.js')).loadModulationTables({ tuning: join(dir, 'tuning.arrow') }).tables, threads: 1 });
    const diff = await diffSnapshots({ base: join(dir, 'base'), mod: mod.folder, task: 'detect:beta', bootstrap: 0 });
    expect(cell.mod.hitRate).toBe(diff.task!.mod.hitRate);
    expect(cell.mod.falseAlarmRate).toBe(diff.task!.mod.falseAlarmRate);
    if (Number.isNaN(diff.task!.change.dPrime)) expect(cell.change.dPrime).toBeNaN();
    else expect(cell.change.dPrime).toBeCloseTo(diff.task!.change.dPrime, 12);
    const category = diff.task!.categories[0]!;
    expect(cell.base.auc).toBeCloseTo(category.auc.base, 12);
    expect(cell.mod.auc).toBeCloseTo(category.auc.mod, 6);
    expect(cell.change.matchedHitRatePp).toBeCloseTo(category.matchedHitRatePp, 9);
    expect(cell.criterionControl.hitRatePp).toBeCloseTo(category.criterionControl.hitRatePp, 9);
    if (Number.isNaN(category.criterionControl.dPrime)) expect(cell.criterionControl.dPrime).toBeNaN();
    else expect(cell.criterionControl.dPrime).toBeCloseTo(category.criterionControl.dPrime, 9);
    for (const point of cell.depthProfile!) {
      const row = diff.layers.find((l) => l.name === point.layer)!;
      expect(point.relativeChange, point.layer).toBeCloseTo(row.relativeChange, 6);
    }
  });

  it('sweepModulations split into one gain vector and one stimulus per runtime call by a tiny run-bytes budget gives the same cells, depth profile included', async () => {
    // the calls only regroup rows; each row is computed on its own (common practice: the runtime's kernels loop over the batch outside the arithmetic)
    const common = { model, from: join(dir, 'base'), sites: ['relu1'], schemes: ['tuning', 'uniform'], strengths: [0.5, 1], task: 'detect:all', tuning: join(dir, 'tuning.arrow'), threads: 1, depthProfile: true, profileStimuli: 12 };
    const whole = await sweepModulations({ ...common, out: join(dir, 'sw-bytes-whole') });
    const split = await sweepModulations({ ...common, out: join(dir, 'sw-bytes-split'), runBytes: 1 });
    expect(split.cells).toEqual(whole.cells);
    await expect(sweepModulations({ ...common, out: join(dir, 'sw-bytes-bad'), runBytes: 0 })).rejects.toThrow(/--run-memory/);
  });

  it('sweepModulations resumed after an interruption equals an uninterrupted sweep', async () => {
    const common = { model, from: join(dir, 'base'), sites: ['relu0', 'relu1'], strengths: [0, 0.3, 0.6], task: 'detect:all', tuning: join(dir, 'tuning.arrow'), threads: 1, vectorsPerRun: 4, controlSeeds: 2 } as const;
    const whole = await sweepModulations({ ...common, out: join(dir, 'sw-whole') });
    let calls = 0;
    await expect(sweepModulations({ ...common, out: join(dir, 'sw-part'), onProgress: () => { if (++calls === 3) throw new Error('interrupted'); } })).rejects.toThrow('interrupted');
    const lines = readFileSync(join(dir, 'sw-part', 'cells.jsonl'), 'utf8').trim().split('\n').length;
    expect(lines).toBeGreaterThan(0);
    expect(lines).toBeLessThan(whole.cells.length);
    const resumed = await sweepModulations({ ...common, out: join(dir, 'sw-part') });
    expect(JSON.stringify(resumed.cells)).toBe(JSON.stringify(whole.cells));
  });

  it('sweepModulations split into shards and merged by concatenating cells.jsonl equals the unsharded sweep', async () => {
    const common = { model, from: join(dir, 'base'), sites: ['relu1'], strengths: [0, 0.4], task: 'detect:all', tuning: join(dir, 'tuning.arrow'), threads: 1, controlSeeds: 2 } as const;
    const whole = await sweepModulations({ ...common, out: join(dir, 'sh-whole') });
    const a = await sweepModulations({ ...common, out: join(dir, 'sh-1'), shard: { index: 1, count: 2 } });
    const b = await sweepModulations({ ...common, out: join(dir, 'sh-2'), shard: { index: 2, count: 2 } });
    expect(a.cells.length + b.cells.length).toBe(whole.cells.length);
    const { mkdirSync } = await import('node:fs');
    mkdirSync(join(dir, 'sh-merged'), { recursive: true });
    writeFileSync(join(dir, 'sh-merged', 'cells.jsonl'), readFileSync(join(dir, 'sh-1', 'cells.jsonl'), 'utf8') + readFileSync(join(dir, 'sh-2', 'cells.jsonl'), 'utf8'));
    const merged = await sweepModulations({ ...common, out: join(dir, 'sh-merged'), onProgress: () => { throw new Error('no cell should be evaluated again'); } });
    expect(JSON.stringify(merged.cells)).toBe(JSON.stringify(whole.cells));
    expect(merged.control).toEqual(whole.control);
  });

  it('sweepModulations writes an Arrow table Polars reads, one row per cell, and calibrates against a target', async () => {
    const result = await sweepModulations({ model, from: join(dir, 'base'), sites: ['relu1'], schemes: ['uniform'], strengths: [0, 0.5, 1, 2], task: 'detect:all', out: join(dir, 'sw-cal'), threads: 1, match: 'accuracy:+0pp' });
    const frame = pl.readIPC(readFileSync(join(dir, 'sw-cal', 'cells.arrow')));
    expect(frame.height).toBe(result.cells.length);
    expect(frame.columns).toContain('d_prime_change');
    expect(frame.getColumn('auc_change').toArray()).toEqual(result.cells.map((c) => c.change.auc));
    // +0 pp is reached at strength 0 already: the smallest strength is 0 with no activity change
    expect(result.calibration[0]!.strength).toBe(0);
    expect(result.calibration[0]!.siteActivityChange).toBe(0);
    expect(parseMatchTarget('dprime:+0.5')).toEqual({ measure: 'dPrime', value: 0.5 });
    expect(parseMatchTarget('auc:+0.05')).toEqual({ measure: 'auc', value: 0.05 });
    expect(() => parseSweepMeasure('accuracy')).toThrow(/--measure/);
    expect(() => parseMatchTarget('dprime:+0.5pp')).toThrow(/--match/);
  });

  it('sonde sweep refuses a scheme without its table and an unknown scheme (exit 2)', async () => {
    const missing = await runSonde(['sweep', model, '--from', join(dir, 'base'), '--sites', 'relu1', '--schemes', 'tuning', '--task', 'detect:alpha', '--out', join(dir, 'x')]);
    expect(missing.code).toBe(2);
    expect(missing.stderr).toMatch(/needs --tuning/);
    const unknown = await runSonde(['sweep', model, '--from', join(dir, 'base'), '--sites', 'relu1', '--schemes', 'magic', '--task', 'detect:alpha', '--out', join(dir, 'x')]);
    expect(unknown.code).toBe(2);
    expect(unknown.stderr).toMatch(/unknown scheme "magic"/);
    const ok = await runSonde(['sweep', model, '--from', join(dir, 'base'), '--sites', 'relu1', '--schemes', 'uniform', '--strengths', '0:0.4:0.2', '--task', 'detect:alpha', '--out', join(dir, 'x2')]);
    expect(ok.code, ok.stderr).toBe(0);
    expect(ok.stdout).toMatch(/β=0\.4/);
  });
});
