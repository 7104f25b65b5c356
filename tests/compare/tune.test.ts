import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import pl from 'nodejs-polars';
import { beforeAll, describe, expect, it } from 'vitest';
import { normaliseAcrossCategories } from '../../src/modulation/gain-pattern.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { LayerFileWriter } from '../../src/snapshot/layer-file.js';
import { FORMAT_VERSION, writeManifest, type ManifestLayer, type SnapshotManifest } from '../../src/snapshot/manifest.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { stimuliDigest, writeStimuliFile } from '../../src/snapshot/stimuli-file.js';
import { listingDigest } from '../../src/stimuli/source.js';
import { createHash } from 'node:crypto';
import { readTuningTable } from '../../src/snapshot/tables.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { renderTuningSummaries } from '../../src/report/tune-table.js';

let dir: string;

// A hand-made snapshot of 5 search displays. Display 4 shows an "a" and a "b" (multi-label).
const LABELS = [['a'], ['a'], ['b'], ['c'], ['a', 'b']];
// Layer "vec" [3]: one value per channel and display (a vector's channel mean is the value itself).
//              d0 d1 d2 d3 d4
const VEC = [
  [1, 3, 4, 7, 2], // channel 0
  [5, 5, 5, 5, 5], // channel 1: constant, zero variance
  [0, 0, 6, 0, 3], // channel 2
];

/** Writes a complete snapshot folder by hand with the snapshot writers: layers "vec" [3] and "map" [2, 1, 2]. */
function handMadeSnapshot(folder: string, labels: string[][]): string {
  mkdirSync(join(folder, 'layers'), { recursive: true });
  const N = labels.length;
  const vec = new Float32Array(N * 3);
  for (let n = 0; n < N; n++) for (let k = 0; k < 3; k++) vec[n * 3 + k] = VEC[k]![n % 5]!;
  // "map": channel k at positions (v − 1, v + 1) for v = VEC[2k][n]; its spatial mean is VEC[2k][n].
  const map = new Float32Array(N * 4);
  for (let n = 0; n < N; n++) {
    for (let k = 0; k < 2; k++) {
      const v = VEC[2 * k]![n % 5]!;
      map[(n * 2 + k) * 2] = v - 1; // [N, C, 1, W]: i = (n*C + k)*W + w
      map[(n * 2 + k) * 2 + 1] = v + 1;
    }
  }
  const layers: ManifestLayer[] = [];
  for (const [depth, name, shape, values] of [[0, 'vec', [3], vec], [1, 'map', [2, 1, 2], map]] as const) {
    const file = `layers/${name}.arrow`;
    const writer = new LayerFileWriter(join(folder, file), { name, shape: [...shape], dtype: 'float32', keep: 'full' });
    writer.write(0, N, values);
    const done = writer.finish();
    layers.push({ name, op: 'Relu', depth, shape: [...shape], dtype: 'float32', keep: 'full', file, sha256: done.sha256, bytes: done.bytes, rows: done.rows });
  }
  const ids = labels.map((_, i) => `d${i}`);
  const digests = new Uint8Array(N * 32);
  ids.forEach((id, i) => digests.set(createHash('sha256').update(id).digest(), i * 32));
  writeStimuliFile(join(folder, 'stimuli.arrow'), ids, labels, { digests });
  const manifest: SnapshotManifest = {
    format: FORMAT_VERSION,
    tool: { name: 'sonde', version: 'test' },
    model: { file: 'hand.onnx', sha256: '0'.repeat(64), input: { name: 'input', shape: [3, 1, 1] } },
    stimuli: { source: 'by hand', count: N, digest: stimuliDigest(digests), listingDigest: listingDigest({ ids, labels }), categories: [...new Set(labels.flat())].sort() },
    preprocessing: null,
    modulation: null,
    baseline: null,
    run: { mode: 'full', batch: N, threads: 1 },
    created: new Date(0).toISOString(),
    layers,
    complete: true,
  };
  writeManifest(folder, manifest);
  return folder;
}

beforeAll(() => {
  dir = tempFolder();
});

describe('tuneSnapshot (hand-made snapshot)', () => {
  it('tuneSnapshot writes the hand-computed means, errors, counts, z-scores, preferences and selectivities (multi-label displays count for each label)', async () => {
    const snapshot = handMadeSnapshot(join(dir, 'hand'), LABELS);
    const out = join(dir, 'hand.arrow');
    const result = await tuneSnapshot({ snapshot, out });
    expect(result.categories).toEqual(['a', 'b', 'c']);
    // multi-label rule: display 4 enters a and b, so a = {d0, d1, d4}, b = {d2, d4}, c = {d3}
    expect(result.counts).toEqual({ a: 3, b: 2, c: 1 });
    const frame = pl.readIPC(readFileSync(out));
    const rows = frame.filter(pl.col('layer').eq(pl.lit('vec'))).toRecords() as Array<Record<string, number | string | boolean | null>>;
    expect(rows).toHaveLength(9);
    const at = (k: number, c: string) => rows.find((r) => r['channel'] === k && r['category'] === c)!;
    // Channel 0: a {1, 3, 2} mean 2, sample sd 1 → sem 1/√3; b {4, 2} mean 3, sd √2 → sem 1; c {7}: sem undefined.
    // Population sd over the means (2, 3, 7): √(14/3); z = (−2, −1, 3)/√(14/3).
    const sd0 = Math.sqrt(14 / 3);
    const expect0: Array<[string, number, number, number, number]> = [['a', 2, 1 / Math.sqrt(3), 3, -2 / sd0], ['b', 3, 1, 2, -1 / sd0], ['c', 7, Number.NaN, 1, 3 / sd0]];
    for (const [c, mean, sem, n, t] of expect0) {
      const r = at(0, c);
      expect(r['mean']).toBeCloseTo(mean, 12);
      if (Number.isNaN(sem)) expect(r['sem']).toBeNaN();
      else expect(r['sem']).toBeCloseTo(sem, 12);
      expect(r['n']).toBe(n);
      expect(r['tuning']).toBeCloseTo(t, 12);
      expect(r['preferred']).toBe('c');
      // selectivity (r_max − r_rest)/(r_max + r_rest) = (7 − 2.5)/(7 + 2.5) = 9/19
      expect(r['selectivity']).toBeCloseTo(9 / 19, 12);
      expect(r['zero_variance']).toBe(false);
    }
    // Channel 1 is constant: tuning 0, flagged, no preference, selectivity (5 − 5)/(5 + 5) = 0.
    for (const c of ['a', 'b', 'c']) {
      expect(at(1, c)['tuning']).toBe(0);
      expect(at(1, c)['zero_variance']).toBe(true);
      expect(at(1, c)['preferred']).toBeNull();
      expect(at(1, c)['selectivity']).toBe(0);
    }
    // Channel 2: means (1, 4.5, 0), centre 11/6, population sd √(402/108); preferred b; selectivity (4.5 − 0.5)/(4.5 + 0.5) = 0.8.
    const sd2 = Math.sqrt(402 / 108);
    expect(at(2, 'a')['tuning']).toBeCloseTo(-5 / 6 / sd2, 12);
    expect(at(2, 'b')['tuning']).toBeCloseTo(16 / 6 / sd2, 12);
    expect(at(2, 'c')['tuning']).toBeCloseTo(-11 / 6 / sd2, 12);
    expect(at(2, 'b')['sem']).toBeCloseTo(1.5, 12); // {6, 3}: sd √4.5, /√2
    expect(at(2, 'a')['preferred']).toBe('b');
    expect(at(2, 'a')['selectivity']).toBeCloseTo(0.8, 12);
    // "map" averages two positions per channel to the values of vec channels 0 and 2.
    const file = readTuningTable(out);
    const vec = file.block('vec')!;
    const map = file.block('map')!;
    expect(map.channels).toBe(2);
    for (let c = 0; c < 3; c++) {
      expect(map.tuning[0 * 3 + c]).toBeCloseTo(vec.tuning[0 * 3 + c]!, 12);
      expect(map.tuning[1 * 3 + c]).toBeCloseTo(vec.tuning[2 * 3 + c]!, 12);
    }
    // summary: selective = index ≥ 1/3 → channels 0 (9/19) and 2 (0.8) of vec
    expect(result.summaries[0]).toMatchObject({ layer: 'vec', channels: 3, zeroVarianceChannels: 1 });
    expect(result.summaries[0]!.selectiveFraction).toBeCloseTo(2 / 3, 12);
    expect(result.summaries[0]!.meanSelectivity).toBeCloseTo((9 / 19 + 0 + 0.8) / 3, 12);
  });

  it('tuneSnapshot({ singleLabel: true }) drops the two-label display', async () => {
    const snapshot = handMadeSnapshot(join(dir, 'hand-single'), LABELS);
    const result = await tuneSnapshot({ snapshot, singleLabel: true, layers: 'vec' });
    expect(result.counts).toEqual({ a: 2, b: 1, c: 1 });
    expect(result.stimuliSkipped).toBe(1);
    const vec = result.blocks[0]!;
    // channel 0: a {1, 3} → 2, b {4} → 4, c {7} → 7
    expect(Array.from(vec.mean.subarray(0, 3))).toEqual([2, 4, 7]);
  });

  it('tuneSnapshot tuning values are already normalised as the modulation resolver normalises tables (z-score, population SD)', async () => {
    const result = await tuneSnapshot({ snapshot: handMadeSnapshot(join(dir, 'hand-norm'), LABELS) });
    for (const block of result.blocks) {
      const K = block.categories.length;
      const columns = block.categories.map((_, c) => Float64Array.from({ length: block.channels }, (_, k) => block.tuning[k * K + c]!));
      const again = normaliseAcrossCategories(columns);
      for (let c = 0; c < K; c++) for (let k = 0; k < block.channels; k++) expect(Math.abs(again[c]![k]! - columns[c]![k]!)).toBeLessThanOrEqual(1e-12);
    }
  });

  it('tuneSnapshot refuses a snapshot without labels, one with a single category, and a category without one-label stimuli', async () => {
    await expect(tuneSnapshot({ snapshot: handMadeSnapshot(join(dir, 'nolabels'), LABELS.map(() => [])) })).rejects.toThrow(/has no labels/);
    await expect(tuneSnapshot({ snapshot: handMadeSnapshot(join(dir, 'onecat'), LABELS.map(() => ['a'])) })).rejects.toThrow(/has 1 category \("a"\); tuning needs at least 2/);
    const labels = [['a'], ['a'], ['b'], ['a', 'c'], ['b']]; // c only on a two-label display
    await expect(tuneSnapshot({ snapshot: handMadeSnapshot(join(dir, 'nosingle'), labels), singleLabel: true })).rejects.toThrow(/category "c" has no stimuli with a single label/);
    await expect(tuneSnapshot({ snapshot: handMadeSnapshot(join(dir, 'badsel'), LABELS), layers: 'nope' })).rejects.toThrow(/tensor "nope" not found/);
  });
});

describe('tuneSnapshot (recorded snapshot)', () => {
  it('tuneSnapshot on a recorded tiny network equals a direct float64 computation from the recorded activations', async () => {
    const model = join(dir, 'tiny.onnx');
    writeFileSync(model, buildTinyNet({ bias: true, seed: 31 }));
    const labels = Array.from({ length: 16 }, (_, i) => ['cat', 'dog', 'bird', 'cat;dog'][i % 4]!);
    const stim = writeStimuliNpy(dir, [16, 3, 16, 16], 9, labels);
    const out = join(dir, 'tiny-snap');
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out, layers: 'relu0+relu1+relu2+logits', batch: 5, threads: 1 });
    const result = await tuneSnapshot({ snapshot: out, out: join(dir, 'tiny.arrow') });
    const snap = openSnapshot(out);
    const categories = ['bird', 'cat', 'dog'];
    expect(result.categories).toEqual(categories);
    expect(result.counts).toEqual({ bird: 4, cat: 8, dog: 8 });
    const file = readTuningTable(join(dir, 'tiny.arrow'));
    for (const name of ['relu0', 'relu1', 'relu2', 'logits']) {
      const { channels: C, spatial: S } = snap.layerGeometry(name);
      const sums = new Float64Array(C * 3);
      const counts = new Float64Array(3);
      for await (const batch of snap.readLayer(name)) {
        for (let r = 0; r < batch.rows; r++) {
          const own = snap.stimuli.labels[batch.index[r]!]!;
          for (let c = 0; c < 3; c++) {
            if (!own.includes(categories[c]!)) continue;
            counts[c] += 1;
            for (let k = 0; k < C; k++) {
              let s = 0;
              for (let p = 0; p < S; p++) s += batch.activation![(r * C + k) * S + p]!; // [rows, C, S]
              sums[k * 3 + c] += s / S;
            }
          }
        }
      }
      const block = file.block(name)!;
      let largest = 0;
      for (let i = 0; i < sums.length; i++) largest = Math.max(largest, Math.abs(sums[i]! / counts[i % 3]!));
      for (let k = 0; k < C; k++) {
        const means = [0, 1, 2].map((c) => sums[k * 3 + c]! / counts[c]!);
        const centre = (means[0]! + means[1]! + means[2]!) / 3;
        const sd = Math.sqrt(means.reduce((a, m) => a + (m - centre) ** 2, 0) / 3);
        for (let c = 0; c < 3; c++) {
          // channel means are stored in float32: 1e-6 of the largest mean
          expect(Math.abs(block.mean[k * 3 + c]! - means[c]!) / largest, `${name} mean ${k},${c}`).toBeLessThanOrEqual(1e-6);
          if (sd > 1e-3 * largest) expect(Math.abs(block.tuning[k * 3 + c]! - (means[c]! - centre) / sd), `${name} t ${k},${c}`).toBeLessThanOrEqual(1e-4);
        }
      }
    }
  });
});

describe('tuneSnapshot on token tensors', () => {
  // The seeded small torchvision VisionTransformer and NumPy's per-feature means over its 17 tokens
  // (tests/reference/make_layout_fixtures.py, Debian python3-torch): with one display per category,
  // r_kc is that display's token mean of feature k.
  const ATTENTION = new URL('../reference/fixtures/attention/', import.meta.url).pathname;
  const index = JSON.parse(readFileSync(join(ATTENTION, 'hooks', 'index-opset14.json'), 'utf8')) as Array<{ onnx: string; slug: string; role: string }>;

  it('tuneSnapshot tunes a [T, D] block output per feature (16), not per token (17), from NumPy\'s token means; the table says features', async () => {
    const folder = tempFolder();
    const labels = join(folder, 'labels.csv');
    writeFileSync(labels, 'label\na\nb\n');
    const out = join(folder, 'vit');
    await recordSnapshot({ model: join(ATTENTION, 'vit-opset14.onnx'), stimuli: join(ATTENTION, 'inputs.npy'), labels, out, batch: 2, threads: 1 });
    const block = index.find((e) => e.role === 'block output')!;
    const result = await tuneSnapshot({ snapshot: out, layers: block.onnx });
    const table = result.blocks[0]!;
    expect(table.channels).toBe(16);
    expect(result.summaries[0]!.unit).toBe('features');
    const path = join(ATTENTION, 'hooks', `${block.slug}_means.npy`);
    const means = parseNpy(readFileSync(path), path).data as ArrayLike<number>; // [2, 16], C order
    expect(renderTuningSummaries(result.summaries)).toMatch(/units[\s\S]*16 features/);
    for (let k = 0; k < 16; k++) {
      for (let c = 0; c < 2; c++) expect(table.mean[k * 2 + c]).toBeCloseTo(means[c * 16 + k]!, 5);
    }
  });
});
