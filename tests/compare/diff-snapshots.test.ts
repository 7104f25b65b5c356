import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import quantile from '@stdlib/stats-base-dists-normal-quantile';
import { beforeAll, describe, expect, it } from 'vitest';
import { collectDiff } from '../../src/compare/diff-collect.js';
import { diffSnapshots, finishDiff } from '../../src/compare/diff-snapshots.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let homogeneous: string;
let biased: string;
let stim: { npy: string; labels: string };
const kinds = ['alpha', 'beta', 'gamma'];

function spec(name: string, body: object): string {
  const path = join(dir, `${name}.json`);
  writeFileSync(path, JSON.stringify(body));
  return path;
}

beforeAll(async () => {
  dir = tempFolder();
  homogeneous = join(dir, 'homog.onnx');
  biased = join(dir, 'biased.onnx');
  writeFileSync(homogeneous, buildTinyNet({ bias: false, seed: 21 }));
  writeFileSync(biased, buildTinyNet({ bias: true, seed: 22, classes: 3 }));
  // sidecar: the readout units are the three categories; decide "present" when the logit > 0
  writeFileSync(join(dir, 'biased.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
  const labels = Array.from({ length: 24 }, (_, i) => [kinds[i % 3]!, ...(i % 4 === 0 ? [kinds[(i + 1) % 3]!] : [])].join(';'));
  stim = writeStimuliNpy(dir, [24, 3, 16, 16], 31, labels);
  await recordSnapshot({ model: homogeneous, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base-h'), batch: 5, threads: 1 });
  await recordSnapshot({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base-b'), batch: 5, threads: 1, layers: 'all' });
});

describe('diffSnapshots', () => {
  it('diffSnapshots(base, base) gives zero change, cosine 1 and ratio 1 at every layer', async () => {
    const report = await diffSnapshots({ base: join(dir, 'base-b'), mod: join(dir, 'base-b'), bootstrap: 0 });
    for (const layer of report.layers) {
      expect(layer.relativeChange, layer.name).toBe(0);
      expect(layer.cosine, layer.name).toBeCloseTo(1, 12);
      // layers with a negative channel mean (conv outputs, logits) show no ratio
      expect(layer.channelRatioMean, layer.name).toBe(layer.signedLayer ? Number.NaN : 1);
      expect(layer.fractionUp + layer.fractionDown, layer.name).toBe(0);
    }
  });

  it('diffSnapshots: uniform gain g on a bias-free ReLU network gives relative change g − 1 and cosine 1 below the site (positive homogeneity)', async () => {
    const g = 1.3;
    const mod = await recordModulated({ model: homogeneous, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'uni'), modulate: spec('uni', { site: 'relu0', kind: 'uniform', strength: g }), from: join(dir, 'base-h'), threads: 1 });
    const report = await diffSnapshots({ base: join(dir, 'base-h'), mod: mod.folder, bootstrap: 0 });
    const site = report.layers.find((l) => l.site)!;
    expect(site.name).toBe('relu0');
    for (const layer of report.layers.filter((l) => l.belowSite >= 0)) {
      expect(Math.abs(layer.relativeChange - (g - 1)), layer.name).toBeLessThan(1e-6);
      expect(layer.cosine, layer.name).toBeCloseTo(1, 6);
      if (!layer.signedLayer) expect(layer.channelRatioMean, layer.name).toBeCloseTo(g, 5);
    }
    // a constant relative change has rate 0: neither halves nor doubles
    expect(Math.abs(report.depthProfile.rate)).toBeLessThan(1e-5);
    expect(report.survival.layer).toBe('logits');
  });

  it('diffSnapshots places a site that was not recorded by graph order: the change survives to the logits (exact: uniform gain on a bias-free ReLU network)', async () => {
    // default layers of the tiny net leave out the Conv outputs: conv1 is not recorded
    const g = 1.5;
    const base = openSnapshot(join(dir, 'base-h'));
    expect(base.manifest.layers.map((l) => l.name)).not.toContain('conv1');
    const mod = await recordModulated({ model: homogeneous, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'unrec'), modulate: spec('unrec', { site: 'conv1', kind: 'uniform', strength: g }), from: join(dir, 'base-h'), threads: 1 });
    const report = await diffSnapshots({ base: join(dir, 'base-h'), mod: mod.folder, bootstrap: 0 });
    expect(report.depthUnit).toBe('weight layers');
    // every layer after conv1 is scaled by g exactly (positive homogeneity), the rest are untouched
    for (const layer of report.layers) {
      expect(layer.downstream, layer.name).toBe(['relu1', 'pool1', 'relu2', 'gap', 'logits'].includes(layer.name));
      if (layer.downstream) expect(Math.abs(layer.relativeChange - (g - 1)), layer.name).toBeLessThan(1e-6);
      else expect(layer.relativeChange, layer.name).toBe(0);
    }
    // conv1 is weight layer 2; conv2 adds one, the MatMul readout another
    expect(Object.fromEntries(report.layers.filter((l) => l.downstream).map((l) => [l.name, l.belowSite]))).toEqual({ relu1: 0, pool1: 0, relu2: 1, gap: 1, logits: 2 });
    expect(report.survival).toEqual({ layer: 'logits', belowSite: 2 });
    expect(report.verdict).toContain('stays above the noise floor down to logits (2 weight layers below)');
    expect(report.verdict).not.toContain('does not rise above the noise floor');
    expect(report.verdict).toMatch(/keeps its size below conv1 \(within 5 % over 2 weight layers\)/);
  });

  it('diffSnapshots measures depth below the site in weight layers, the same whatever layers were recorded', async () => {
    const all = await recordSnapshot({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base-b-default'), batch: 5, threads: 1 });
    const path = spec('depth-unit', { site: 'relu0', kind: 'gain', values: [1.6, 0.5, 1.2, 0.9] });
    const few = await recordModulated({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'depth-few'), modulate: path, from: all.folder, threads: 1 });
    const many = await recordModulated({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'depth-many'), modulate: path, from: join(dir, 'base-b'), threads: 1 });
    const a = await diffSnapshots({ base: all.folder, mod: few.folder, bootstrap: 0 });
    const b = await diffSnapshots({ base: join(dir, 'base-b'), mod: many.folder, bootstrap: 0 });
    expect(b.layers.length).toBeGreaterThan(a.layers.length);
    for (const row of a.layers) {
      const twin = b.layers.find((l) => l.name === row.name)!;
      expect(twin.belowSite, row.name).toBe(row.belowSite);
      expect(twin.downstream, row.name).toBe(row.downstream);
      expect(twin.relativeChange, row.name).toBeCloseTo(row.relativeChange, 6);
    }
    expect(a.survival).toEqual(b.survival);
    // the biased tiny net: relu0 is after weight layer 1, the logits after 4 (three convs and the MatMul)
    expect(a.survival.belowSite).toBe(3);
    expect(a.depthUnit).toBe('weight layers');
  });

  it('diffSnapshots names a spatial window in the verdict, so a windowed gain and the same gain without one read differently', async () => {
    const plain = await recordModulated({ model: homogeneous, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'plain'), modulate: spec('plain', { site: 'relu0', kind: 'uniform', gain: 1.5 }), from: join(dir, 'base-h'), threads: 1 });
    const windowed = await recordModulated({ model: homogeneous, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'windowed'), modulate: spec('windowed', { site: 'relu0', kind: 'uniform', gain: 1.5, window: { shape: 'gaussian', cx: 0.3, cy: 0.5, sigma: 0.15 } }), from: join(dir, 'base-h'), threads: 1 });
    const a = await diffSnapshots({ base: join(dir, 'base-h'), mod: plain.folder, bootstrap: 0 });
    const b = await diffSnapshots({ base: join(dir, 'base-h'), mod: windowed.folder, bootstrap: 0 });
    expect(a.verdict).not.toContain('window');
    expect(b.verdict).toMatch(/^the change \(within a gaussian window at \(0\.3, 0\.5\) σ 0\.15\)/);
  });

  it('diffSnapshots streaming over differently batched snapshots equals an in-memory computation', async () => {
    const path = spec('gain', { site: 'pool0', kind: 'gain', values: [0.2, 1.8, 1.1, 0.6] });
    const mod = await recordModulated({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'gain'), modulate: path, from: join(dir, 'base-b'), fullRun: true, batch: 7, threads: 1 });
    const report = await diffSnapshots({ base: join(dir, 'base-b'), mod: mod.folder, bootstrap: 0 });
    const base = openSnapshot(join(dir, 'base-b'));
    const modSnap = openSnapshot(mod.folder);
    for (const layer of report.layers) {
      const a: number[] = [];
      const b: number[] = [];
      for await (const batch of base.readLayer(layer.name)) a.push(...batch.activation!);
      for await (const batch of modSnap.readLayer(layer.name)) b.push(...batch.activation!);
      let dd = 0;
      let aa = 0;
      let bb = 0;
      let ab = 0;
      for (let i = 0; i < a.length; i++) {
        dd += (b[i]! - a[i]!) ** 2;
        aa += a[i]! ** 2;
        bb += b[i]! ** 2;
        ab += a[i]! * b[i]!;
      }
      expect(layer.relativeChange, layer.name).toBeCloseTo(Math.sqrt(dd / aa), 9);
      expect(layer.cosine, layer.name).toBeCloseTo(ab / Math.sqrt(aa * bb), 9);
    }
  });

  it('diffSnapshots flags a threshold at which the baseline answers the same for every display: no d′ or criterion, said in the verdict', async () => {
    const mod = await recordModulated({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'degenerate'), modulate: spec('degenerate', { site: 'relu1', kind: 'uniform', gain: 1.2 }), from: join(dir, 'base-b'), threads: 1 });
    // a threshold above every logit: hit and false-alarm rates 0 on the baseline (d′ would come from the correction alone)
    const report = await diffSnapshots({ base: join(dir, 'base-b'), mod: mod.folder, task: 'detect:beta,gamma', threshold: 1e9, bootstrap: 50 });
    const task = report.task!;
    for (const c of task.categories) {
      expect(c.base.hitRate + c.base.falseAlarmRate, c.category).toBe(0);
      expect(c.degenerate, c.category).toContain('says "absent" to every display at threshold 1000000000');
      expect(c.base.dPrime).toBeNaN();
      expect(c.mod.criterion).toBeNaN();
      expect(c.ci!.dPrime[0]).toBeNaN();
      // the threshold-free read-out is unaffected
      expect(Number.isFinite(c.auc.change)).toBe(true);
    }
    expect(task.change.dPrime).toBeNaN();
    expect(report.verdict).toContain('no d′ at the fixed threshold for all 2 categories: the baseline says "absent" to every display');
    // so is the accuracy-maximising threshold when "absent" for every display is the most accurate answer (8 of 24 show beta)
    const best = await diffSnapshots({ base: join(dir, 'base-b'), mod: mod.folder, task: 'detect:beta', threshold: 'best', bootstrap: 0 });
    expect(best.task!.categories[0]!.threshold).toBe(Number.POSITIVE_INFINITY);
    expect(best.task!.categories[0]!.degenerate).toContain('at threshold +∞');
    // a threshold inside the baseline's scores is not flagged
    const logits = await openSnapshot(join(dir, 'base-b')).readChannelMeans('logits');
    const beta = Array.from({ length: logits.length / 3 }, (_, i) => logits[i * 3 + 1]!).sort((x, y) => x - y);
    const fine = await diffSnapshots({ base: join(dir, 'base-b'), mod: mod.folder, task: 'detect:beta', threshold: (beta[8]! + beta[9]!) / 2, bootstrap: 0 });
    expect(fine.task!.categories[0]!.degenerate).toBeNull();
    expect(Number.isFinite(fine.task!.change.dPrime)).toBe(true);
  });

  it('diffSnapshots detection read-out matches hand-counted rates and d′ from @stdlib quantiles', async () => {
    const mod = await recordModulated({ model: biased, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'task'), modulate: spec('task', { site: 'relu1', kind: 'uniform', strength: 1.5 }), from: join(dir, 'base-b'), threads: 1 });
    // a threshold inside the baseline's beta logits (at the sidecar's 0 this net says "absent" to every display, which diff flags)
    const logits = await openSnapshot(join(dir, 'base-b')).readChannelMeans('logits');
    const beta = Array.from({ length: logits.length / 3 }, (_, i) => logits[i * 3 + 1]!).sort((x, y) => x - y);
    const t = (beta[8]! + beta[9]!) / 2;
    const report = await diffSnapshots({ base: join(dir, 'base-b'), mod: mod.folder, task: 'detect:beta', threshold: t, bootstrap: 0 });
    const task = report.task!;
    expect(task.categories[0]!.threshold).toBe(t);
    expect(task.categories[0]!.degenerate).toBeNull();
    for (const [side, folder] of [['base', join(dir, 'base-b')], ['mod', mod.folder]] as const) {
      const snap = openSnapshot(folder);
      const scores = await snap.readChannelMeans('logits');
      let hits = 0;
      let signal = 0;
      let fas = 0;
      let noise = 0;
      snap.stimuli.labels.forEach((labels, i) => {
        const yes = scores[i * 3 + 1]! > t;
        if (labels.includes('beta')) {
          signal++;
          if (yes) hits++;
        } else {
          noise++;
          if (yes) fas++;
        }
      });
      const stats = task.categories[0]![side];
      expect(stats.hitRate).toBeCloseTo(hits / signal, 12);
      expect(stats.falseAlarmRate).toBeCloseTo(fas / noise, 12);
      const edge = hits === 0 || hits === signal || fas === 0 || fas === noise;
      // log-linear correction when a rate is 0 or 1 (Hautus 1995)
      const h = edge ? (hits + 0.5) / (signal + 1) : hits / signal;
      const f = edge ? (fas + 0.5) / (noise + 1) : fas / noise;
      expect(stats.dPrime).toBeCloseTo(quantile(h, 0, 1) - quantile(f, 0, 1), 9);
      expect(stats.criterion).toBeCloseTo(-(quantile(h, 0, 1) + quantile(f, 0, 1)) / 2, 9);
    }
    expect(task.change.dPrime).toBeCloseTo(task.categories[0]!.mod.dPrime - task.categories[0]!.base.dPrime, 12);
  });

  it('diffSnapshots ROC area equals brute-force pair counting on the recorded logits, and its interval holds the estimate', async () => {
    // Definition of the area (Mann–Whitney: P(S > N) + ½P(S = N)), counted over every signal/noise pair here.
    const report = await diffSnapshots({ base: join(dir, 'base-b'), mod: join(dir, 'task'), task: 'detect:beta', bootstrap: 300, seed: 2 });
    const category = report.task!.categories[0]!;
    for (const [side, folder] of [['base', join(dir, 'base-b')], ['mod', join(dir, 'task')]] as const) {
      const snap = openSnapshot(folder);
      const scores = await snap.readChannelMeans('logits');
      const isBeta = snap.stimuli.labels.map((l) => l.includes('beta'));
      let wins = 0;
      let pairs = 0;
      for (let i = 0; i < isBeta.length; i++) {
        for (let j = 0; j < isBeta.length; j++) {
          if (!isBeta[i] || isBeta[j]) continue;
          pairs++;
          wins += scores[i * 3 + 1]! > scores[j * 3 + 1]! ? 1 : scores[i * 3 + 1] === scores[j * 3 + 1] ? 0.5 : 0;
        }
      }
      expect(category.auc[side]).toBeCloseTo(wins / pairs, 12);
    }
    expect(category.auc.change).toBeCloseTo(category.auc.mod - category.auc.base, 14);
    expect(category.auc.ci![0]).toBeLessThanOrEqual(category.auc.change);
    expect(category.auc.ci![1]).toBeGreaterThanOrEqual(category.auc.change);
    expect(category.auc.ci).toEqual(category.ci!.auc);
    expect(report.task!.measure).toBe('auc');
    expect(report.verdict).toMatch(/detection by ROC area \(threshold-free\) [+-]\d\.\d{3} \[/);
    const byDPrime = await diffSnapshots({ base: join(dir, 'base-b'), mod: join(dir, 'task'), task: 'detect:beta', bootstrap: 0, measure: 'dprime' });
    expect(byDPrime.verdict).toMatch(/detection by d′ at the fixed threshold/);
  });

  it('diffSnapshots: a constant offset of every readout logit leaves ROC area, its interval and the matched hit rate unchanged exactly while fixed-threshold d′ moves', async () => {
    // Exact property: a constant preserves the order of the scores (checked below: no ties made or broken);
    // the sidecar threshold 0 meets the shifted logits elsewhere, so hit and false-alarm rates move.
    const base = openSnapshot(join(dir, 'base-b'));
    const collection = await collectDiff(base, openSnapshot(join(dir, 'base-b')), { base, mod: base, task: 'labels', bootstrap: 200 });
    const task = collection.task!;
    // the shift that puts threshold 0 between two noise logits of the first category (k false alarms, k ≠ now)
    const unit0 = task.kinds.indexOf(task.categories[0]!);
    const noise0 = task.labels.flatMap((labels, i) => (labels.includes(task.categories[0]!) ? [] : [task.baseScores[i * task.units + unit0]!])).sort((x, y) => y - x);
    const now = noise0.filter((v) => v > 0).length;
    const k = now === 2 ? 4 : 2;
    const shift = -(noise0[k - 1]! + noise0[k]!) / 2;
    const shifted = task.baseScores.map((v) => v + shift);
    expect(new Set(shifted).size).toBe(new Set(task.baseScores).size);
    const report = await finishDiff({ ...collection, task: { ...task, modScores: shifted } }, { bootstrap: 200, seed: 1 });
    let moved = 0;
    for (const c of report.task!.categories) {
      expect(c.auc.mod, c.category).toBe(c.auc.base);
      expect(c.auc.ci, c.category).toEqual([0, 0]);
      expect(c.matchedHitRatePp, c.category).toBe(0);
      if (c.change.dPrime !== 0) moved++;
      // the criterion-only control reproduces the shifted false-alarm rate on the baseline logits
      const unit = c.unit;
      let falseAlarms = 0;
      let noise = 0;
      task.labels.forEach((labels, i) => {
        if (labels.includes(c.category)) return;
        noise++;
        if (task.baseScores[i * task.units + unit]! + c.criterionControl.shift > c.threshold) falseAlarms++;
      });
      expect(falseAlarms / noise, c.category).toBe(c.mod.falseAlarmRate);
    }
    expect(moved).toBeGreaterThan(0);
  });

  it('diffSnapshots bootstrap with a fixed seed is reproducible, and another seed differs', async () => {
    const mod = join(dir, 'gain');
    const a = await diffSnapshots({ base: join(dir, 'base-b'), mod, bootstrap: 200, seed: 5, task: 'labels' });
    const b = await diffSnapshots({ base: join(dir, 'base-b'), mod, bootstrap: 200, seed: 5, task: 'labels' });
    const c = await diffSnapshots({ base: join(dir, 'base-b'), mod, bootstrap: 200, seed: 6, task: 'labels' });
    expect(JSON.stringify(a)).toBe(JSON.stringify(b));
    expect(a.layers.map((l) => l.relativeChangeCi)).not.toEqual(c.layers.map((l) => l.relativeChangeCi));
    const site = a.layers.find((l) => l.site)!;
    expect(site.relativeChangeCi![0]).toBeLessThanOrEqual(site.relativeChange);
    expect(site.relativeChangeCi![1]).toBeGreaterThanOrEqual(site.relativeChange);
  });

  it('diffSnapshots with vs compares two schemes layer by layer', async () => {
    const comparison = await diffSnapshots({ base: join(dir, 'base-b'), mod: join(dir, 'gain'), vs: join(dir, 'task'), bootstrap: 100, task: 'detect:beta' });
    expect(comparison.layers).toHaveLength(comparison.a.layers.length);
    for (const l of comparison.layers) expect(['a', 'b', 'equal']).toContain(l.larger);
    expect(comparison.task).not.toBeNull();
    expect(comparison.verdict).toMatch(/layers/);
    // one category: the mean over categories is that category, interval included (exact identity)
    expect(comparison.a.task!.categories).toHaveLength(1);
    expect(comparison.a.task!.ci).toEqual(comparison.a.task!.categories[0]!.ci);
  });

  it('sonde diff refuses snapshots that do not pair, with a one-line reason', async () => {
    const other = await runSonde(['diff', join(dir, 'base-h'), join(dir, 'base-b')]);
    expect(other.code).toBe(2);
    expect(other.stderr.trim().split('\n')).toHaveLength(1);
    expect(other.stderr).toMatch(/another model/);
    const sub = join(dir, 'other-stim');
    const otherStim = writeStimuliNpy(tempFolder(), [24, 3, 16, 16], 99);
    await recordSnapshot({ model: biased, stimuli: otherStim.npy, labels: otherStim.labels, out: sub, layers: 'all' });
    const stimuliDiffer = await runSonde(['diff', join(dir, 'base-b'), sub]);
    expect(stimuliDiffer.code).toBe(2);
    expect(stimuliDiffer.stderr).toMatch(/other stimuli/);
  });

  it('sonde diff --json carries the report contract and --csv writes one row per layer', async () => {
    const csv = join(dir, 'diff.csv');
    const result = await runSonde(['diff', join(dir, 'base-b'), join(dir, 'task'), '--task', 'detect:beta', '--bootstrap', '50', '--json', '--csv', csv]);
    expect(result.code, result.stderr).toBe(0);
    const json = JSON.parse(result.stdout);
    for (const layer of json.layers) for (const key of ['name', 'depth', 'relativeChange', 'cosine', 'channelRatioMean']) expect(layer).toHaveProperty(key);
    for (const side of ['base', 'mod']) for (const key of ['hitRate', 'falseAlarmRate', 'dPrime', 'criterion', 'accuracy']) expect(json.task[side]).toHaveProperty(key);
    const lines = readFileSync(csv, 'utf8').trim().split('\n');
    expect(lines).toHaveLength(json.layers.length + 1);
    const table = await runSonde(['diff', join(dir, 'base-b'), join(dir, 'task'), '--task', 'detect:beta', '--bootstrap', '50']);
    expect(table.stdout).toMatch(/verdict: /);
    expect(table.stdout).toMatch(/d′/);
  });
});
