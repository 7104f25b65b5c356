/**
 * mapReadout (src/replay/mapped-readout.ts) and sense under a readout map: a 1000-unit readout grouped
 * into 4 stimulus categories. Checks:
 * - the appended category scores equal the log-sum-exp of the recorded logits computed directly in
 *   float64 (the definition, up to float32 rounding of the runtime);
 * - the exact gradient of a category score is Σ_u softmax-within-category(y)_u · ∂y_u/∂g (the chain rule
 *   for log-sum-exp, an exact identity), built here from per-unit exact gradients of the raw logits;
 * - exact and Richardson finite differences agree under the map (the same derivative by two methods;
 *   the tiny net is piecewise linear in the gain, so away from kinks they match to rounding).
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readReadoutMap } from '../../src/graph/category-map.js';
import { loadModel } from '../../src/graph/load-model.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { mapReadout } from '../../src/replay/mapped-readout.js';
import { exactGainJacobian } from '../../src/replay/sense-exact.js';
import { senseSites } from '../../src/replay/sense.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { readSensitivityTable, READOUT_MAP_KEY } from '../../src/snapshot/tables.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let base: string;
const KINDS = ['ring', 'bar', 'disc', 'cross'];
/** 1000 units; ring 0..99, bar 100..349, disc the single unit 500, cross a scattered list; the rest unmapped. */
const INLINE = 'ring=0..99;bar=100..349;disc=500;cross=600,613,777,999';

beforeAll(async () => {
  dir = tempFolder('sonde-mapped-readout-');
  mkdirSync(join(dir, 'm'));
  model = join(dir, 'm', 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 23, classes: 1000 }));
  const labels = Array.from({ length: 12 }, (_, i) => KINDS[i % 4]! + (i % 5 === 0 ? `;${KINDS[(i + 1) % 4]}` : ''));
  const stim = writeStimuliNpy(join(dir, 'm'), [12, 3, 16, 16], 9, labels);
  base = join(dir, 'base');
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: base, batch: 4, threads: 1 });
});

/** Direct float64 log-sum-exp of a list (max-shifted). */
function lse(values: number[]): number {
  const m = Math.max(...values);
  return m + Math.log(values.reduce((s, v) => s + Math.exp(v - m), 0));
}

describe('mapReadout', () => {
  it('mapReadout appends category scores equal to the float64 log-sum-exp of the recorded logits (within float32 rounding)', async () => {
    const loaded = loadModel(model);
    const inspection = await inspectModel(loaded);
    const mapped = await mapReadout(undefined, loaded, inspection, readReadoutMap(INLINE));
    expect(mapped.readout.categories).toEqual(KINDS);
    expect(mapped.map.groups.map((g) => g.length)).toEqual([100, 250, 1, 4]);
    expect(mapped.model.sha256).toBe(loaded.sha256);
    const snapshot = openSnapshot(base);
    const logits = await snapshot.readChannelMeans('logits');
    // the mapped model's score output, replayed from the baseline through the exact-gradient machinery's forward pass
    const run = await exactGainJacobian({ model: mapped.model, inspection: mapped.inspection, baseline: snapshot, site: 'relu2', readout: mapped.readout.tensor, units: [0], threads: 1 });
    const n = snapshot.manifest.stimuli.count;
    for (let i = 0; i < n; i++) {
      mapped.map.groups.forEach((units, g) => {
        const want = lse(units.map((u) => logits[i * 1000 + u]!));
        const got = run.scores[i * 4 + g]!;
        expect(Math.abs(got - want)).toBeLessThanOrEqual(1e-5 * Math.max(1, Math.abs(want)));
      });
    }
  });

  it('mapReadout refuses a --readout that names one unit, and an unknown tensor', async () => {
    const loaded = loadModel(model);
    const inspection = await inspectModel(loaded);
    await expect(mapReadout('logits:3', loaded, inspection, readReadoutMap(INLINE))).rejects.toThrow(/picks one unit/);
    await expect(mapReadout('logitz', loaded, inspection, readReadoutMap(INLINE))).rejects.toThrow(/does not exist.*closest: "logits"/);
  });
});

describe('senseSites with a readout map', () => {
  it('senseSites exact under a map is Σ softmax-within-category · per-unit gradient (chain rule of log-sum-exp), averaged over each category\'s stimuli', async () => {
    const snapshot = openSnapshot(base);
    const map = readReadoutMap('ring=0..9;cross=600,613,777,999');
    const result = await senseSites({ model, from: base, site: 'relu1', readoutMap: map, stimuliOf: 'each', threads: 1 });
    const block = result.sites[0]!;
    expect(block.categories).toEqual(['ring', 'cross']);
    expect(result.metadata[READOUT_MAP_KEY]).toBe(JSON.stringify({ name: 'inline', sha256: map.sha256 }));
    expect(result.metadata['sonde.readout']).toBe('logits');
    // per-unit exact gradients of the raw logits at every stimulus
    const loaded = loadModel(model);
    const inspection = await inspectModel(loaded);
    const groups = [[0, 1, 2, 3, 4, 5, 6, 7, 8, 9], [600, 613, 777, 999]];
    const units = groups.flat();
    const raw = await exactGainJacobian({ model: loaded, inspection, baseline: snapshot, site: 'relu1', readout: 'logits', units, threads: 1 });
    const C = raw.channels;
    const n = snapshot.manifest.stimuli.count;
    const labels = snapshot.stimuli.labels;
    ['ring', 'cross'].forEach((category, g) => {
      const members = groups[g]!;
      const want = new Float64Array(C);
      let count = 0;
      for (let i = 0; i < n; i++) {
        if (!labels[i]!.includes(category)) continue;
        count++;
        const y = members.map((u) => raw.scores[i * 1000 + u]!);
        const total = lse(y);
        members.forEach((u, j) => {
          const p = Math.exp(y[j]! - total);
          const jac = raw.jacobian[units.indexOf(u)]!;
          for (let k = 0; k < C; k++) want[k] += p * jac[i * C + k]!;
        });
      }
      let largest = 0;
      for (let k = 0; k < C; k++) largest = Math.max(largest, Math.abs(want[k]! / count));
      expect(largest).toBeGreaterThan(0);
      for (let k = 0; k < C; k++) expect(Math.abs(block.sensitivity[k * 2 + g]! - want[k]! / count)).toBeLessThanOrEqual(1e-4 * largest);
      expect(block.count[g]).toBe(count);
    });
  });

  it('senseSites under a map: exact and Richardson finite differences agree (both see the appended log-sum-exp)', async () => {
    const map = readReadoutMap(INLINE);
    const exact = (await senseSites({ model, from: base, site: 'relu2', readoutMap: map, stimuliOf: 'each', threads: 1 })).sites[0]!;
    const fd = (await senseSites({ model, from: base, site: 'relu2', readoutMap: map, stimuliOf: 'each', threads: 1, method: 'richardson' })).sites[0]!;
    expect(fd.categories).toEqual(KINDS);
    for (let c = 0; c < 4; c++) {
      let largest = 0;
      for (let k = 0; k < exact.channels; k++) largest = Math.max(largest, Math.abs(exact.sensitivity[k * 4 + c]!));
      for (let k = 0; k < exact.channels; k++) expect(Math.abs(exact.sensitivity[k * 4 + c]! - fd.sensitivity[k * 4 + c]!)).toBeLessThanOrEqual(1e-2 * largest);
    }
  });

  it('senseSites under a map writes the map into the table, and --stimuli-of each names a map category no stimulus carries', async () => {
    const out = join(dir, 'sens-map.arrow');
    const map = readReadoutMap(INLINE);
    await senseSites({ model, from: base, site: 'relu1', readoutMap: map, stimuliOf: 'each', threads: 1, out });
    const table = readSensitivityTable(out);
    expect(table.categories).toEqual(KINDS);
    expect(JSON.parse(table.metadata[READOUT_MAP_KEY]!)).toEqual({ name: 'inline', sha256: map.sha256 });
    await expect(senseSites({ model, from: base, site: 'relu1', readoutMap: readReadoutMap('ring=0..9;star=10'), stimuliOf: 'each', threads: 1 })).rejects.toThrow(/"star" has no stimuli containing it/);
  });
});
