/**
 * senseOneSiteExact and exactGainJacobian (src/replay/sense-exact.ts): exact properties of the
 * per-stimulus gradients — the average of exactGainJacobian over the stimuli equals senseSites' exact
 * table (the same derivative, averaged), and each stimulus's derivatives agree with central differences
 * of the downstream part replayed at gains 1 ± h on each channel (`scoreGains`), the exact derivative
 * being the limit of the central difference (a ReLU network is piecewise linear: a step of 1e-3 that
 * crosses no kink gives the derivative up to float32 rounding).
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { scoreGains } from '../../src/replay/gain-scores.js';
import { exactGainJacobian } from '../../src/replay/sense-exact.js';
import { senseSites } from '../../src/replay/sense.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let base: string;

beforeAll(async () => {
  dir = tempFolder('sonde-sense-exact-');
  mkdirSync(join(dir, 'm'));
  model = join(dir, 'm', 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 17, classes: 3 }));
  const stim = writeStimuliNpy(join(dir, 'm'), [6, 3, 16, 16], 5);
  base = join(dir, 'base');
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: base, batch: 4, threads: 1 });
});

describe('exactGainJacobian', () => {
  it('exactGainJacobian per stimulus agrees with central differences of replays at gains 1 ± 1e-3, and its mean is senseSites exact', async () => {
    const loaded = loadModel(model);
    const inspection = await inspectModel(loaded);
    const snapshot = openSnapshot(base);
    const site = 'relu1';
    const units = [0, 2];
    const exact = await exactGainJacobian({ model: loaded, inspection, baseline: snapshot, site, readout: 'logits', units, threads: 1 });
    const C = exact.channels;
    const n = snapshot.manifest.stimuli.count;
    const h = 1e-3;
    const patterns: Float32Array[][] = [[new Float32Array(C).fill(1)]];
    for (let k = 0; k < C; k++) {
      for (const sign of [1, -1]) {
        const g = new Float32Array(C).fill(1);
        g[k] = 1 + sign * h;
        patterns.push([g]);
      }
    }
    const scored = await scoreGains({ model: loaded, inspection, baseline: snapshot, sites: [site], gains: patterns, readout: 'logits', threads: 1 });
    const Kout = exact.units;
    // the readout at g = 1 is the baseline's
    for (let i = 0; i < n * Kout; i++) expect(exact.scores[i]).toBeCloseTo(scored[0]![i]!, 5);
    units.forEach((unit, c) => {
      let largest = 0;
      for (const v of exact.jacobian[c]!) largest = Math.max(largest, Math.abs(v));
      expect(largest).toBeGreaterThan(0);
      for (let i = 0; i < n; i++) {
        for (let k = 0; k < C; k++) {
          const up = scored[1 + 2 * k]![i * Kout + unit]!;
          const down = scored[2 + 2 * k]![i * Kout + unit]!;
          const central = (up - down) / (Math.fround(1 + h) - Math.fround(1 - h));
          expect(Math.abs(exact.jacobian[c]![i * C + k]! - central) / largest, `unit ${unit}, stimulus ${i}, channel ${k}`).toBeLessThanOrEqual(1e-3);
        }
      }
    });
    const table = (await senseSites({ model, from: base, site, threads: 1 })).sites[0]!;
    const K = table.categories.length;
    units.forEach((unit, c) => {
      for (let k = 0; k < C; k++) {
        let mean = 0;
        for (let i = 0; i < n; i++) mean += exact.jacobian[c]![i * C + k]! / n;
        expect(table.sensitivity[k * K + unit]).toBeCloseTo(mean, 6);
      }
    });
  });
});

describe('senseSites split by run bytes', () => {
  it('senseSites with a run-bytes budget below one row runs one stimulus and one category per gradient run (one row per finite-difference run) and gives the same table', async () => {
    // rows are computed independently and summed in the same order however they are grouped (common practice: batch-independent kernels)
    for (const method of ['exact', 'secant'] as const) {
      const whole = (await senseSites({ model, from: base, site: 'relu1', method, threads: 1 })).sites[0]!;
      const split = (await senseSites({ model, from: base, site: 'relu1', method, threads: 1, runBytes: 1 })).sites[0]!;
      expect(split.rows).toBe(whole.rows);
      expect(split.runs).toBe(method === 'exact' ? split.stimuliUsed * split.categories.length : split.rows);
      if (method === 'exact') expect(split.categories.length).toBeGreaterThan(1);
      expect(split.runs).toBeGreaterThan(whole.runs);
      expect(Array.from(split.sensitivity)).toEqual(Array.from(whole.sensitivity));
    }
    await expect(senseSites({ model, from: base, site: 'relu1', threads: 1, runBytes: -1 })).rejects.toThrow(/--run-memory/);
  });
});
