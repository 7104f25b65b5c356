import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { senseSites } from '../../src/replay/sense.js';
import { loadModulationTables } from '../../src/replay/modulation-tables.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { readSensitivityTable, readTuningTable } from '../../src/snapshot/tables.js';
import { buildTinyNet, concatActivations, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

// The table-driven modulation kinds: g_k = max(0, 1 + β·v_k,c*) with v the table normalised across
// categories (feature-similarity gain, see DOMAIN.md), and lesion of the top-k channels by tuning.

let dir: string;
let model: string;
let stim: { npy: string; labels: string };
let baseline: string;
let tuningPath: string;
let sensitivityPath: string;
const CATEGORIES = ['bird', 'cat', 'dog'];

/** z-score of each channel's values across categories, population SD (DOMAIN.md "Tuning values"). */
function zScores(rows: Float64Array[]): Float64Array[] {
  const C = rows[0]!.length;
  const K = rows.length;
  const out = rows.map(() => new Float64Array(C));
  for (let k = 0; k < C; k++) {
    const values = rows.map((r) => r[k]!);
    const mean = values.reduce((a, b) => a + b, 0) / K;
    const sd = Math.sqrt(values.reduce((a, v) => a + (v - mean) ** 2, 0) / K);
    for (let c = 0; c < K; c++) out[c]![k] = sd > 0 ? (values[c]! - mean) / sd : 0;
  }
  return out;
}

beforeAll(async () => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 3 }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds: CATEGORIES } }));
  const labels = Array.from({ length: 12 }, (_, i) => ['cat', 'dog', 'bird', 'cat;bird'][i % 4]!);
  stim = writeStimuliNpy(dir, [12, 3, 16, 16], 13, labels);
  baseline = join(dir, 'base');
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: baseline, layers: 'all', batch: 4, threads: 1 });
  tuningPath = join(dir, 'tuning.arrow');
  await tuneSnapshot({ snapshot: baseline, out: tuningPath, layers: 'relu1+relu2' });
  sensitivityPath = join(dir, 'sens.arrow');
  await senseSites({ model, from: baseline, site: 'relu1', stimuliOf: 'each', threads: 1, out: sensitivityPath });
});

describe('table-driven modulation kinds', () => {
  it('loadModulationTables(tuning) drives the tuning kind: the fed gains are max(0, 1 + β·t_k,target) and the site is scaled channel by channel', async () => {
    const loaded = loadModulationTables({ tuning: tuningPath });
    expect(loaded.categories).toEqual(CATEGORIES);
    expect(loaded.layers.tuning).toEqual(['relu1', 'relu2']);
    const spec = join(dir, 'tuning-spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu1', kind: 'tuning', target: 'cat', strength: 0.75 }));
    const summary = await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'mod-tuning'), modulate: spec, from: baseline, tables: loaded.tables, categories: loaded.categories, batch: 4, threads: 1 });
    const block = readTuningTable(tuningPath).block('relu1')!;
    const record = (summary.manifest.modulation as { modulations: Array<{ gain: number[] }> }).modulations[0]!;
    const C = block.channels;
    const expected = Array.from({ length: C }, (_, k) => Math.fround(Math.max(0, 1 + 0.75 * block.tuning[k * 3 + 1]!)));
    expect(record.gain).toEqual(expected);
    expect(expected.some((g) => g > 1) && expected.some((g) => g < 1)).toBe(true); // a real pattern, not the identity
    const base = await concatActivations(openSnapshot(baseline).readLayer('relu1'));
    const mod = await concatActivations(openSnapshot(summary.folder).readLayer('relu1'));
    const S = base.length / (12 * C);
    for (let i = 0; i < base.length; i++) {
      const k = Math.floor(i / S) % C; // [N, C, S]
      expect(mod[i]).toBe(Math.fround(base[i]! * expected[k]!)); // y = x·G + 0, one float32 multiply
    }
  });

  it('lesion with top = 2 by tuning silences the two channels most tuned to the target', async () => {
    const loaded = loadModulationTables({ tuning: tuningPath });
    const spec = join(dir, 'lesion-spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu2', kind: 'lesion', top: 2, target: 'dog' }));
    const summary = await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'mod-lesion'), modulate: spec, from: baseline, tables: loaded.tables, categories: loaded.categories, batch: 4, threads: 1 });
    const block = readTuningTable(tuningPath).block('relu2')!;
    const order = Array.from({ length: block.channels }, (_, k) => k).sort((a, b) => block.tuning[b * 3 + 2]! - block.tuning[a * 3 + 2]! || a - b);
    const record = (summary.manifest.modulation as { modulations: Array<{ details: { channels: number[] } }> }).modulations[0]!;
    expect(record.details.channels).toEqual(order.slice(0, 2));
    const mod = await concatActivations(openSnapshot(summary.folder).readLayer('relu2'));
    const C = block.channels;
    const S = mod.length / (12 * C);
    for (let i = 0; i < mod.length; i++) {
      const k = Math.floor(i / S) % C;
      if (order.slice(0, 2).includes(k)) expect(mod[i]).toBe(0);
    }
  });

  it('loadModulationTables(sensitivity) drives the sensitivity kind with the table z-scored across categories', async () => {
    const loaded = loadModulationTables({ sensitivity: sensitivityPath });
    expect(loaded.categories).toEqual(CATEGORIES); // the readout's kinds, which are the label names
    const spec = join(dir, 'sens-spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu1', kind: 'sensitivity', target: 'dog', strength: 0.4 }));
    const summary = await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'mod-sens'), modulate: spec, from: baseline, tables: loaded.tables, categories: loaded.categories, batch: 4, threads: 1 });
    const block = readSensitivityTable(sensitivityPath).block('relu1')!;
    const rows = [0, 1, 2].map((c) => Float64Array.from({ length: block.channels }, (_, k) => block.sensitivity[k * 3 + c]!));
    const z = zScores(rows)[2]!;
    const record = (summary.manifest.modulation as { modulations: Array<{ gain: number[] }> }).modulations[0]!;
    record.gain.forEach((g, k) => expect(g).toBeCloseTo(Math.fround(Math.max(0, 1 + 0.4 * z[k]!)), 6));
  });

  it('loadModulationTables refuses tables whose categories differ, and missing files', () => {
    const other = join(dir, 'sens-units.arrow');
    writeFileSync(join(dir, 'plain.onnx'), buildTinyNet({ bias: true, seed: 41, classes: 3 }));
    return senseSites({ model: join(dir, 'plain.onnx'), stimuli: stim.npy, site: 'relu1', threads: 1, out: other }).then(() => {
      expect(() => loadModulationTables({ tuning: tuningPath, sensitivity: other })).toThrow(/3 in the tuning table: bird, cat, dog; 3 in the sensitivity table: 0, 1, 2\): "bird" is in --tuning .* but not in --sensitivity/);
      expect(() => loadModulationTables({ tuning: join(dir, 'absent.arrow') })).toThrow(/tuning table .*absent\.arrow does not exist/);
      expect(() => loadModulationTables({})).toThrow(/needs a tuning or a sensitivity table/);
    });
  });
});
