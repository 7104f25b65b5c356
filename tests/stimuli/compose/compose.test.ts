import { mkdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import sharp from 'sharp';
import { beforeAll, describe, expect, it } from 'vitest';
import { composeStimulusSet } from '../../../src/stimuli/compose/index.js';
import { openStimulusSource, parseCsv } from '../../../src/stimuli/source.js';
import { tempFolder } from '../../helpers/onnx-builder.js';

let dir = '';
let from = '';
const CATEGORIES = ['apple', 'boat', 'cup'];

/** 16x16 source images: category k, image i has pixel (x, y) = (40k + 3i + x, 5y + i, 200 − 10k + x) — every value distinct per source. */
async function sourcePixels(k: number, i: number): Promise<Buffer> {
  const raw = Buffer.alloc(16 * 16 * 3);
  for (let y = 0; y < 16; y++) for (let x = 0; x < 16; x++) raw.set([40 * k + 3 * i + x, 5 * y + i, 200 - 10 * k + x], (y * 16 + x) * 3);
  return raw;
}

beforeAll(async () => {
  dir = tempFolder('sonde-compose-');
  from = join(dir, 'photos');
  for (const [k, category] of CATEGORIES.entries()) {
    mkdirSync(join(from, category), { recursive: true });
    for (let i = 0; i < 3; i++) await sharp(await sourcePixels(k, i), { raw: { width: 16, height: 16, channels: 3 } }).png().toFile(join(from, category, `${i}.png`));
  }
});

async function rgb(path: string): Promise<Buffer> {
  return (await sharp(path).raw().toBuffer({ resolveWithObject: true })).data;
}

describe('composeStimulusSet', () => {
  it('composeStimulusSet overlay: every composite is round(w·a + (1 − w)·b) of the two sources its listing names, labelled with both', async () => {
    const out = join(dir, 'overlay');
    const summary = await composeStimulusSet({ from, out, count: 8, seed: 4, layout: { kind: 'overlay', weight: 0.25 }, size: [16, 16] });
    expect(summary.count).toBe(8);
    const sources = parseCsv(readFileSync(join(out, 'sources.csv'), 'utf8'), 'sources.csv');
    expect(sources[0]).toEqual(['image', 'slot', 'row', 'column', 'weight', 'source', 'source_category']);
    const labels = parseCsv(readFileSync(join(out, 'labels.csv'), 'utf8'), 'labels.csv').slice(1);
    expect(labels).toHaveLength(8);
    for (const [image, label] of labels) {
      const rows = sources.filter((r) => r[0] === image);
      expect(rows.map((r) => r[4])).toEqual(['0.25', '0.75']);
      expect(label).toBe([rows[0]![6], rows[1]![6]].sort().join(';'));
      expect(rows[0]![6]).not.toBe(rows[1]![6]);
      const [a, b, c] = [await rgb(join(from, rows[0]![5]!)), await rgb(join(from, rows[1]![5]!)), await rgb(join(out, image!))];
      let wrong = 0;
      // weight 1/4: round half up of (a + 3b) / 4 in integers
      for (let i = 0; i < c.length; i++) if (c[i] !== Math.floor((a[i]! + 3 * b[i]! + 2) / 4)) wrong++;
      expect(wrong, image).toBe(0);
    }
  });

  it('composeStimulusSet grid with a cue: the cue in exactly half the composites, cells exact copies of the listed sources', async () => {
    const out = join(dir, 'grid');
    const summary = await composeStimulusSet({ from, out, count: 10, seed: 9, layout: { kind: 'grid', k: 2 }, cued: 'boat', size: [32, 32], fit: 'squash', interpolation: 'nearest' });
    expect(summary.composites.boat).toBe(5);
    const sources = parseCsv(readFileSync(join(out, 'sources.csv'), 'utf8'), 'sources.csv').slice(1);
    const labels = parseCsv(readFileSync(join(out, 'labels.csv'), 'utf8'), 'labels.csv').slice(1);
    expect(labels.filter(([, l]) => l!.split(';').includes('boat'))).toHaveLength(5);
    for (const [image, label] of labels.slice(0, 3)) {
      const composite = await rgb(join(out, image!));
      const rows = sources.filter((r) => r[0] === image);
      expect(rows).toHaveLength(4);
      expect(label).toBe([...new Set(rows.map((r) => r[6]))].sort().join(';'));
      for (const row of rows) {
        const [r, c] = [Number(row[2]), Number(row[3])];
        const cell = await rgb(join(from, row[5]!));
        let wrong = 0;
        for (let y = 0; y < 16; y++) for (let x = 0; x < 16; x++) for (let s = 0; s < 3; s++) if (composite[((r * 16 + y) * 32 + c * 16 + x) * 3 + s] !== cell[(y * 16 + x) * 3 + s]) wrong++;
        expect(wrong, `${image} cell ${r},${c}`).toBe(0);
      }
    }
    // record reads the folder with no extra flag: its labels file lists every image
    const source = openStimulusSource(out, { preprocessing: { size: [32, 32], mean: [0, 0, 0], std: [1, 1, 1], bgr: false }, channels: 3 });
    expect(source.count).toBe(10);
    expect(source.labels.filter((l) => l.includes('boat'))).toHaveLength(5);
  });

  it('composeStimulusSet is deterministic: same seed, same bytes; another seed, another set', async () => {
    await composeStimulusSet({ from, out: join(dir, 'd1'), count: 4, seed: 1, layout: { kind: 'overlay', weight: 0.5 }, size: [16, 16] });
    await composeStimulusSet({ from, out: join(dir, 'd2'), count: 4, seed: 1, layout: { kind: 'overlay', weight: 0.5 }, size: [16, 16] });
    await composeStimulusSet({ from, out: join(dir, 'd3'), count: 4, seed: 2, layout: { kind: 'overlay', weight: 0.5 }, size: [16, 16] });
    for (const file of ['labels.csv', 'sources.csv', 'images/000000.png', 'images/000003.png']) expect(readFileSync(join(dir, 'd2', file))).toEqual(readFileSync(join(dir, 'd1', file)));
    expect(readFileSync(join(dir, 'd3', 'sources.csv'), 'utf8')).not.toBe(readFileSync(join(dir, 'd1', 'sources.csv'), 'utf8'));
  });

  it('composeStimulusSet refuses an odd count with a cue, an unknown cue, a bad weight and a grid that does not divide the size', async () => {
    const base = { from, count: 4, seed: 1, size: [16, 16] as [number, number] };
    await expect(composeStimulusSet({ ...base, out: join(dir, 'e1'), count: 5, cued: 'cup', layout: { kind: 'overlay', weight: 0.5 } })).rejects.toThrow(/must be even with --cued/);
    await expect(composeStimulusSet({ ...base, out: join(dir, 'e2'), cued: 'cap', layout: { kind: 'overlay', weight: 0.5 } })).rejects.toThrow(/"cap" is not a category/);
    await expect(composeStimulusSet({ ...base, out: join(dir, 'e3'), layout: { kind: 'overlay', weight: 1 } })).rejects.toThrow(/strictly between 0 and 1/);
    await expect(composeStimulusSet({ ...base, out: join(dir, 'e4'), layout: { kind: 'grid', k: 3 } })).rejects.toThrow(/does not split into 3x3/);
  });
});
