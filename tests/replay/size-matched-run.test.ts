import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { classifyReportInput } from '../../src/report/html/inputs.js';
import { runSizeMatched } from '../../src/replay/size-matched-run.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { pairAuc } from '../helpers/pair-auc.js';

const kinds = ['alpha', 'beta', 'gamma'];
let dir: string;
let model: string;
let fit: string;
let heldOut: string;
let tuning: string;

async function baseline(name: string, seed: number): Promise<string> {
  const folder = join(dir, name);
  mkdirSync(folder);
  const labels = Array.from({ length: 36 }, (_, i) => [kinds[i % 3]!, ...(i % 4 === 0 ? [kinds[(i + 1) % 3]!] : [])].join(';'));
  const stim = writeStimuliNpy(folder, [36, 3, 16, 16], seed, labels);
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(folder, 'base'), batch: 12, threads: 1 });
  return join(folder, 'base');
}

beforeAll(async () => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 3 }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
  fit = await baseline('fit', 5);
  heldOut = await baseline('held', 6);
  tuning = join(dir, 'tuning.arrow');
  await tuneSnapshot({ snapshot: fit, out: tuning });
}, 120_000);

describe('runSizeMatched', () => {
  it('runSizeMatched scales every scheme to the size asked for, measures the unmodulated ROC area as pair counting does, and writes JSON the report reads', async () => {
    const out = join(dir, 'comparison.json');
    const c = await runSizeMatched({ model, fit, from: heldOut, sites: ['relu0', 'relu2'], size: 0.1, tuning, controlSeeds: 2, resamples: 50, threads: 1, out });
    expect(c.heldOut).toBe(true);
    expect(c.categories).toEqual(kinds);
    // bisection on β: tuning and shuffled rows sit at the target size (exact up to the bisection's tolerance)
    for (const e of c.effects.filter((x) => x.scheme === 'tuning' || x.scheme === 'shuffled')) expect(e.size, `${e.scheme} ${e.site}`).toBeCloseTo(0.1, 5);
    // the ceiling is of at most that size
    for (const e of c.effects.filter((x) => x.scheme === 'ceiling')) expect(e.size).toBeLessThanOrEqual(0.1 + 1e-6);
    expect(new Set(c.effects.map((e) => e.site))).toEqual(new Set(['relu0', 'relu2']));
    // baseline ROC area against the Mann–Whitney pair count on the recorded logits of the held-out set
    const snap = openSnapshot(heldOut);
    const logits = await snap.readChannelMeans('logits');
    const n = snap.manifest.stimuli.count;
    let mean = 0;
    kinds.forEach((k, u) => {
      const scores = Array.from({ length: n }, (_, i) => logits[i * 3 + u]!);
      const signal = snap.stimuli.labels.map((l) => (l.includes(k) ? 1 : 0));
      const auc = pairAuc(scores, signal);
      for (const e of c.effects) expect(e.perCategory.find((p) => p.category === k)!.baseAuc).toBeCloseTo(auc, 12);
      mean += auc / kinds.length;
    });
    expect(c.baseAuc).toBeCloseTo(mean, 12);
    // the reported change is the mean of the per-category changes (the point estimate of the interval)
    for (const e of c.effects.filter((x) => x.scheme !== 'shuffled')) expect(e.aucChange.estimate).toBeCloseTo(e.perCategory.reduce((s, p) => s + p.aucChange, 0) / kinds.length, 10);
    const written = JSON.parse(readFileSync(out, 'utf8')) as Record<string, unknown>;
    expect(classifyReportInput(written, out)[0]!.kind).toBe('size-matched');
    expect((written['evaluation'] as { tables: Array<{ from: string }> }).tables[0]!.from).toBe(fit);
  }, 120_000);

  it('runSizeMatched on one baseline says the evaluation is not held out', async () => {
    const progress: Array<[number, number]> = [];
    const c = await runSizeMatched({ model, fit, from: fit, sites: ['relu2'], size: 0.05, task: 'detect:alpha', tuning, controlSeeds: 1, resamples: 20, threads: 1, onProgress: (done, total) => progress.push([done, total]) });
    // progress over the ceiling fit and the held-out scoring: never past its total, and ends at it
    expect(progress.length).toBeGreaterThan(1);
    for (const [done, total] of progress) expect(done).toBeLessThanOrEqual(total);
    expect(progress[progress.length - 1]![0]).toBe(progress[progress.length - 1]![1]);
    expect(c.heldOut).toBe(false);
    expect(c.categories).toEqual(['alpha']);
  }, 120_000);

  it('runSizeMatched refuses a size outside (0, 1], an unknown site, a category without a unit and an existing --out, each in one line', async () => {
    const base = { model, fit, from: heldOut, sites: ['relu2'], tuning, resamples: 10, threads: 1 };
    for (const size of [0, -0.1, 1.5, Number.NaN]) await expect(runSizeMatched({ ...base, size })).rejects.toThrow(/--size .* must be a fraction in \(0, 1\]/);
    await expect(runSizeMatched({ ...base, size: 0.1, sites: ['relu9'] })).rejects.toThrow(/"relu9" not found/);
    await expect(runSizeMatched({ ...base, size: 0.1, task: 'detect:delta' })).rejects.toThrow(/"delta" has no readout unit/);
    const taken = join(dir, 'taken.json');
    writeFileSync(taken, '{}');
    await expect(runSizeMatched({ ...base, size: 0.1, out: taken })).rejects.toThrow(/already exists/);
  });
});

describe('sonde size-matched', () => {
  it('sonde size-matched prints the table and writes --out; a bad --size exits 2 with one line', async () => {
    const out = join(dir, 'cli.json');
    const ok = await runSonde(['size-matched', model, '--fit', fit, '--from', heldOut, '--sites', 'relu2', '--size', '0.08', '--tuning', tuning, '--control-seeds', '1', '--resamples', '20', '--threads', '1', '--out', out]);
    expect(ok.code, ok.stderr).toBe(0);
    expect(ok.stdout).toMatch(/held out/);
    expect(ok.stdout).toMatch(/ceiling/);
    expect(ok.stdout).toMatch(/tuning − shuffled ΔAUC/);
    expect(existsSync(out)).toBe(true);
    const bad = await runSonde(['size-matched', model, '--fit', fit, '--from', heldOut, '--sites', 'relu2', '--size', '2', '--tuning', tuning, '--out', join(dir, 'bad.json')]);
    expect(bad.code).toBe(2);
    // one error line (after the progress line), naming the value and the fix
    const lines = bad.stderr.trim().split('\n').filter((l) => !l.startsWith('comparing at'));
    expect(lines).toHaveLength(1);
    expect(lines[0]).toMatch(/--size 2 .*e\.g\. --size 0\.1/);
  }, 120_000);
});
