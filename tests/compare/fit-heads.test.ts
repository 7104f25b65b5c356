import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { fitReadoutHeads } from '../../src/compare/fit-heads.js';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { loadModel } from '../../src/graph/load-model.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { senseSites } from '../../src/replay/sense.js';
import { sweepModulations } from '../../src/replay/sweep.js';
import { loadModulationTables } from '../../src/replay/modulation-tables.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, runSonde, tempFolder } from '../helpers/onnx-builder.js';
import { pairAuc } from '../helpers/pair-auc.js';

const kinds = ['ring', 'bar', 'dot'];
let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
let base: string;

/** n displays [3, 16, 16]: noise, plus per present kind a bright patch in its own colour channel and place (invented demo-like data). */
function writeDisplays(folder: string, n: number, seed: number): { npy: string; labels: string } {
  const rng = createRandom(seed);
  const data = new Float32Array(n * 3 * 16 * 16);
  const labels: string[] = [];
  for (let i = 0; i < n; i++) {
    const present = kinds.filter(() => rng.uniform() < 0.5);
    labels.push(present.join(';'));
    for (let k = 0; k < data.length / n; k++) data[i * 768 + k] = 0.3 * rng.uniform();
    for (const kind of present) {
      const c = kinds.indexOf(kind);
      for (let h = 4 * c; h < 4 * c + 6; h++) for (let w = 2; w < 10; w++) data[((i * 3 + c) * 16 + h) * 16 + w] += 0.6; // NCHW
    }
  }
  const header = `{'descr': '<f4', 'fortran_order': False, 'shape': (${n}, 3, 16, 16), }`;
  const text = header + ' '.repeat((64 - ((10 + header.length + 1) % 64)) % 64) + '\n';
  const out = new Uint8Array(10 + text.length + data.byteLength);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0], 0);
  new DataView(out.buffer).setUint16(8, text.length, true);
  for (let i = 0; i < text.length; i++) out[10 + i] = text.charCodeAt(i);
  out.set(new Uint8Array(data.buffer), 10 + text.length);
  writeFileSync(join(folder, 'stimuli.npy'), out);
  writeFileSync(join(folder, 'labels.csv'), `label\n${labels.map((l) => (l === '' ? '""' : l)).join('\n')}\n`);
  return { npy: join(folder, 'stimuli.npy'), labels: join(folder, 'labels.csv') };
}

beforeAll(async () => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  // a 10-unit output the categories do not name: heads are what make a detection readout here
  writeFileSync(model, buildTinyNet({ bias: true, seed: 7, classes: 10 }));
  stimuli = writeDisplays(dir, 80, 3);
  base = join(dir, 'base');
  await recordSnapshot({ model, stimuli: stimuli.npy, labels: stimuli.labels, out: base, batch: 20, threads: 1 });
}, 120_000);

describe('fitReadoutHeads', () => {
  it('fitReadoutHeads writes a model whose head outputs equal the fitted logits of the recorded channel means (float32), with a sidecar naming them as the readout', async () => {
    const out = join(dir, 'net-heads.onnx');
    const result = await fitReadoutHeads({ model, from: base, layer: 'relu1', out, folds: 4, seed: 2 });
    expect(result.heads.map((h) => h.category)).toEqual([...kinds].sort());
    const sidecar = JSON.parse(readFileSync(join(dir, 'net-heads.json'), 'utf8')) as { outputs: { name: string; kinds: string[]; threshold: number }; heads: { layer: string } };
    expect(sidecar.outputs).toEqual({ name: 'readout_heads', kinds: result.heads.map((h) => h.category), threshold: 0 });
    expect(sidecar.heads.layer).toBe('relu1');
    // the patches are easy to see: every head detects its kind well on held-out displays
    for (const h of result.heads) {
      expect(h.heldOut!.auc, h.category).toBeGreaterThan(0.8);
      expect(h.crossValidated.auc, h.category).toBeGreaterThan(0.8);
      expect(h.heldOut!.positives + h.heldOut!.negatives).toBe(result.heldOutStimuli);
    }
    expect(result.heldOutStimuli).toBe(16); // round(0.2 · 80)
    // record the new model on the same displays: its readout is the heads
    const headsBase = join(dir, 'base-heads');
    await recordSnapshot({ model: out, stimuli: stimuli.npy, labels: stimuli.labels, out: headsBase, batch: 20, threads: 1 });
    const snap = openSnapshot(headsBase);
    expect(snap.manifest.readout?.name).toBe('readout_heads');
    const recorded = await snap.readChannelMeans('readout_heads');
    const features = await openSnapshot(base).readChannelMeans('relu1');
    const C = result.channels;
    const K = result.heads.length;
    // logits computed here in float64 from the returned standardisation and weights
    result.heads.forEach((h, k) => {
      for (let i = 0; i < 80; i++) {
        let z = h.coefficients.intercept;
        for (let c = 0; c < C; c++) z += ((features[i * C + c]! - result.standardisation.mean[c]!) / result.standardisation.scale[c]!) * h.coefficients.weights[c]!;
        expect(recorded[i * K + k]!, `${h.category} stimulus ${i}`).toBeCloseTo(z, 4);
      }
    });
    // held-out ROC area as reported = pair counting on the recorded head outputs of the held-out displays
    const heldRows = result.heldOutRows;
    result.heads.forEach((h, k) => {
      const scores = heldRows.map((i) => recorded[i * K + k]!);
      const signal = heldRows.map((i) => (snap.stimuli.labels[i]!.includes(h.category) ? 1 : 0));
      expect(h.heldOut!.auc).toBeCloseTo(pairAuc(scores, signal), 6);
    });
  }, 120_000);

  it('fitReadoutHeads refuses too few positives for k folds, an unrecorded layer, a non-.onnx --out and an existing one, each in one line naming the fix', async () => {
    const opts = { model, from: base, layer: 'relu1', out: join(dir, 'x.onnx') };
    await expect(fitReadoutHeads({ ...opts, folds: 40 })).rejects.toThrow(/category "\w+" has \d+ positive and \d+ negative fitting stimuli; 40-fold cross-validation needs at least 40 of each/);
    await expect(fitReadoutHeads({ ...opts, layer: 'nope' })).rejects.toThrow(/--layer "nope" was not recorded/);
    await expect(fitReadoutHeads({ ...opts, out: join(dir, 'x.model') })).rejects.toThrow(/must end in \.onnx/);
    await expect(fitReadoutHeads({ ...opts, categories: ['ring', 'star'] })).rejects.toThrow(/no stimulus .* is labelled "star"/);
    await expect(fitReadoutHeads({ ...opts, heldOut: 0.9 })).rejects.toThrow(/--held-out 0.9/);
    await expect(fitReadoutHeads({ ...opts, layer: 'logits', folds: 3 })).resolves.toBeTruthy(); // a vector layer [C] (the bias Add; the MatMul before it is not recorded by default)
    writeFileSync(join(dir, 'taken.onnx'), 'x');
    await expect(fitReadoutHeads({ ...opts, out: join(dir, 'taken.onnx') })).rejects.toThrow(/already exists/);
  });
});

describe('a model with fitted heads', () => {
  it('passes through tune, sense (gradients through the heads), sweep, a tail-replayed modulated recording and diff', async () => {
    const out = join(dir, 'flow-heads.onnx');
    await fitReadoutHeads({ model, from: base, layer: 'relu2', out, folds: 3, seed: 1, balanced: true });
    const headsBase = join(dir, 'flow-base');
    await recordSnapshot({ model: out, stimuli: stimuli.npy, labels: stimuli.labels, out: headsBase, batch: 20, threads: 1 });
    const tuning = join(dir, 'flow-tuning.arrow');
    await tuneSnapshot({ snapshot: headsBase, out: tuning });
    const sensitivity = join(dir, 'flow-sens.arrow');
    const sense = await senseSites({ model: out, from: headsBase, site: 'relu0', stimuliOf: 'each', out: sensitivity, threads: 1 });
    expect(sense).toBeTruthy();
    const tables = loadModulationTables({ tuning, sensitivity });
    expect(tables.categories.sort()).toEqual([...kinds].sort());
    const sens = tables.tables.sensitivity!('relu0', 'ring')!;
    expect(sens.every(Number.isFinite)).toBe(true);
    expect(sens.some((v) => v !== 0)).toBe(true);
    const sweep = await sweepModulations({ model: out, from: headsBase, sites: ['relu0'], schemes: ['tuning', 'sensitivity'], strengths: [0, 0.3], task: 'detect:all', tuning, sensitivity, out: join(dir, 'flow-sweep'), threads: 1 });
    // strength 0 is gain 1: the baseline's ROC area exactly
    for (const cell of sweep.cells.filter((c) => c.strength === 0)) expect(cell.change.auc).toBe(0);
    expect(sweep.cells.filter((c) => c.strength === 0.3).every((c) => Number.isFinite(c.change.auc))).toBe(true);
    const spec = join(dir, 'flow-spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu0', kind: 'tuning', target: 'ring', strength: 0.3 }));
    const loaded = loadModel(out);
    const mod = await recordModulated({ model: loaded, stimuli: stimuli.npy, labels: stimuli.labels, out: join(dir, 'flow-mod'), modulate: spec, from: headsBase, tables: tables.tables, categories: tables.categories, threads: 1 });
    expect(existsSync(mod.folder)).toBe(true);
    const report = await diffSnapshots({ base: headsBase, mod: mod.folder, task: 'detect:ring', bootstrap: 50, seed: 1 });
    expect(report.task!.categories[0]!.category).toBe('ring');
    expect(Number.isFinite(report.task!.auc.change)).toBe(true);
  }, 180_000);
});

describe('sonde heads', () => {
  it('sonde heads prints the per-category table and exits 2 with one line for too many folds', async () => {
    const ok = await runSonde(['heads', model, '--from', base, '--layer', 'relu1', '--out', join(dir, 'cli-heads.onnx'), '--folds', '3', '--c-values', '0.01,0.1,1']);
    expect(ok.code, ok.stderr).toBe(0);
    expect(ok.stdout).toMatch(/held-out AUC/);
    expect(ok.stdout).toMatch(/ring/);
    const bad = await runSonde(['heads', model, '--from', base, '--layer', 'relu1', '--out', join(dir, 'cli-bad.onnx'), '--folds', '50']);
    expect(bad.code).toBe(2);
    expect(bad.stderr.trim().split('\n')).toHaveLength(1);
  }, 120_000);
});
