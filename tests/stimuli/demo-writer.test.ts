import { mkdtemp, readFile, readdir, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import sharp from 'sharp';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { formatNpy, parseNpy } from '../../src/stimuli/npy.js';
import { createDisplaySet, encodePng, makeStimulusSet, npyFloat32Header } from '../../src/stimuli/demo/index.js';

let root = '';
beforeAll(async () => {
  root = await mkdtemp(join(tmpdir(), 'sonde-demo-writer-'));
});
afterAll(async () => {
  await rm(root, { recursive: true, force: true });
});

async function folderBytes(folder: string): Promise<Map<string, Buffer>> {
  const out = new Map<string, Buffer>();
  for (const entry of await readdir(folder, { recursive: true, withFileTypes: true })) {
    if (!entry.isFile()) continue;
    const path = join(entry.parentPath, entry.name);
    out.set(path.slice(folder.length), await readFile(path));
  }
  return out;
}

describe('makeStimulusSet', () => {
  it('makeStimulusSet({format: png}) twice with the same seed writes byte-identical files', async () => {
    const a = join(root, 'png-a');
    const b = join(root, 'png-b');
    await makeStimulusSet({ out: a, count: 12, seed: 77 });
    await makeStimulusSet({ out: b, count: 12, seed: 77 });
    const fa = await folderBytes(a);
    const fb = await folderBytes(b);
    expect([...fa.keys()].sort()).toEqual([...fb.keys()].sort());
    expect(fa.size).toBe(12 + 2);
    for (const [path, bytes] of fa) expect(bytes.equals(fb.get(path)!), path).toBe(true);
  });

  it('makeStimulusSet({format: npy}) twice with the same seed writes byte-identical files', async () => {
    const a = join(root, 'npy-a');
    const b = join(root, 'npy-b');
    await makeStimulusSet({ out: a, count: 6, seed: 78, format: 'npy', cued: 'disc' });
    await makeStimulusSet({ out: b, count: 6, seed: 78, format: 'npy', cued: 'disc' });
    const fa = await folderBytes(a);
    const fb = await folderBytes(b);
    expect([...fa.keys()].sort()).toEqual(['/labels.csv', '/set.json', '/stimuli.npy']);
    for (const [path, bytes] of fa) expect(bytes.equals(fb.get(path)!), path).toBe(true);
  });

  it('makeStimulusSet({format: png}) writes valid 64×64 RGB PNGs that decode to the rendered pixels', async () => {
    const out = join(root, 'png-check');
    const summary = await makeStimulusSet({ out, count: 4, seed: 5, cued: 'cross' });
    const set = createDisplaySet({ count: 4, seed: 5, cued: 'cross' });
    const csv = (await readFile(join(out, 'labels.csv'), 'utf8')).trimEnd().split('\n');
    expect(csv[0]).toBe('path,label');
    expect(csv).toHaveLength(5);
    for (let i = 0; i < 4; i++) {
      const [path, label] = csv[i + 1]!.split(',');
      expect(path).toBe(`images/00000${i}.png`);
      const display = set.render(i);
      expect(label).toBe(display.labels.join(';'));
      // decoded by sharp (libvips + libpng), an implementation independent of our encoder's input layout
      const { data, info } = await sharp(join(out, path!)).raw().toBuffer({ resolveWithObject: true });
      expect([info.width, info.height, info.channels]).toEqual([64, 64, 3]);
      let mismatches = 0;
      for (let p = 0; p < 64 * 64; p++) {
        for (let c = 0; c < 3; c++) if (data[3 * p + c] !== Math.round(display.pixels[c * 4096 + p]! * 255)) mismatches++;
      }
      expect(mismatches).toBe(0);
    }
    const description = JSON.parse(await readFile(join(out, 'set.json'), 'utf8')) as Record<string, unknown>;
    expect(description).toMatchObject({ seed: 5, count: 4, cued: 'cross', clutter: 0.6, noise: 0.18, generatorVersion: 1, format: 'png' });
    expect(summary.kindCounts.cross).toBe(2);
  });

  it('makeStimulusSet({format: npy}) writes [N, 3, 64, 64] float32 and a one-column label CSV in row order', async () => {
    const out = join(root, 'npy-check');
    await makeStimulusSet({ out, count: 3, seed: 6, format: 'npy' });
    const tensor = parseNpy(await readFile(join(out, 'stimuli.npy')));
    expect(tensor.descr).toBe('<f4');
    expect(tensor.shape).toEqual([3, 3, 64, 64]);
    const set = createDisplaySet({ count: 3, seed: 6 });
    const labels = (await readFile(join(out, 'labels.csv'), 'utf8')).trimEnd().split('\n');
    expect(labels[0]).toBe('label');
    for (let i = 0; i < 3; i++) {
      const display = set.render(i);
      expect(labels[i + 1]).toBe(display.labels.join(';'));
      expect(Buffer.from(tensor.data.buffer, i * 4 * 12288, 4 * 12288).equals(Buffer.from(display.pixels.buffer))).toBe(true);
    }
  });

  it('makeStimulusSet(options) refuses a non-empty output folder and bad options', async () => {
    const out = join(root, 'png-a'); // written above
    await expect(makeStimulusSet({ out, count: 2, seed: 1 })).rejects.toThrow(UsageError);
    await expect(makeStimulusSet({ out: join(root, 'bad'), count: 3, seed: 1, cued: 'ring' })).rejects.toThrow(/count = 3/);
  });
});

describe('npyFloat32Header', () => {
  it('npyFloat32Header(shape) + data equals formatNpy(data, shape) byte for byte', () => {
    for (const shape of [[2, 3, 64, 64], [7]]) {
      const data = new Float32Array(shape.reduce((a, b) => a * b, 1));
      for (let i = 0; i < data.length; i++) data[i] = i / data.length;
      const header = npyFloat32Header(shape);
      const joined = Buffer.concat([Buffer.from(header), Buffer.from(data.buffer)]);
      expect(joined.equals(Buffer.from(formatNpy(data, shape)))).toBe(true);
    }
    // NumPy format 1.0: the data start (magic + version + length + header) is a multiple of 64
    expect(npyFloat32Header([1000, 3, 64, 64]).length % 64).toBe(0);
  });
});

describe('encodePng', () => {
  it('encodePng(pixels) gives the same bytes for the same pixels', async () => {
    const pixels = createDisplaySet({ seed: 1 }).render(0).pixels;
    const a = await encodePng(pixels);
    const b = await encodePng(Float32Array.from(pixels));
    expect(a.equals(b)).toBe(true);
    expect(a.subarray(0, 8).equals(Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]))).toBe(true); // PNG signature (PNG spec §5.2)
  });
});
