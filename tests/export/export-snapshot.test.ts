/**
 * exportSnapshot against Sonde's own snapshot reader (openSnapshot/readLayer, the reference every other
 * command uses): every exported value equals the value the reader hands out, bit for bit, for a float32
 * baseline, a float16 baseline with channel-means-only layers, and a modulated snapshot whose upstream
 * layers live in its baseline. The `.npy` files are parsed by the format's own rules (numpy.lib.format:
 * magic, version, header dict, 64-byte alignment), independently of the writer.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { acquireLock } from '../../src/disk/lock.js';
import { exportSnapshot } from '../../src/export/export-snapshot.js';
import type { ExportDescription } from '../../src/export/export-description.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { parseNpyHeader } from '../../src/stimuli/npy.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let stim: { npy: string; labels: string };
let base: string;
let half: string;
let mod: string;

beforeAll(async () => {
  dir = tempFolder('sonde-export-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 6 }));
  stim = writeStimuliNpy(dir, [10, 3, 16, 16], 11);
  base = join(dir, 'base');
  half = join(dir, 'half');
  mod = join(dir, 'mod');
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: base, layers: 'all', batch: 4, threads: 1 });
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: half, layers: 'all', batch: 3, threads: 1, dtype: 'float16' });
  const spec = join(dir, 'gain.json');
  writeFileSync(spec, JSON.stringify({ site: 'relu0', kind: 'uniform', gain: 1.5 }));
  await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: mod, modulate: spec, from: base, batch: 4, threads: 1 });
});

/** The stored bytes of a .npy file's data, with its header parsed by the format rules. */
function readNpy(path: string): { descr: string; shape: number[]; data: Buffer } {
  const bytes = readFileSync(path);
  const header = parseNpyHeader(bytes, path);
  expect(header.dataStart % 64).toBe(0); // NumPy aligns the data to 64 bytes (numpy.lib.format ARRAY_ALIGN)
  expect(header.fortranOrder).toBe(false);
  return { descr: header.descr, shape: header.shape, data: bytes.subarray(header.dataStart) };
}

/** Every exported array equals what openSnapshot reads, as stored bits. */
async function expectSameAsReader(snapshotFolder: string, exportFolder: string, description: ExportDescription): Promise<void> {
  const snap = openSnapshot(snapshotFolder);
  expect(description.stimuli.id).toEqual(snap.stimuli.ids);
  expect(description.stimuli.labels).toEqual(snap.stimuli.labels);
  for (const layer of description.layers) {
    const entry = snap.layer(layer.name);
    const n = snap.manifest.stimuli.count;
    const means = readNpy(join(exportFolder, layer.channelMeans.file));
    expect(means.descr).toBe('<f4');
    expect(means.shape).toEqual([n, layer.channels]);
    const expectedMeans = await snap.readChannelMeans(layer.name);
    expect(Buffer.compare(means.data, Buffer.from(expectedMeans.buffer, expectedMeans.byteOffset, expectedMeans.byteLength))).toBe(0);
    if (entry.keep === 'channels') {
      expect(layer.activation).toBeNull();
      continue;
    }
    const acts = readNpy(join(exportFolder, layer.activation!.file));
    const half = layer.activation!.dtype === 'float16';
    expect(acts.descr).toBe(half ? '<f2' : '<f4');
    expect(acts.shape).toEqual([n, ...entry.shape]);
    const parts: Buffer[] = [];
    // float16 as stored: the bits; widened (--float32) or float32: the values openSnapshot hands out
    for await (const batch of snap.readLayer(layer.name, { raw: half })) {
      const values = half ? batch.activationFloat16! : batch.activation!;
      parts.push(Buffer.from(values.buffer.slice(values.byteOffset, values.byteOffset + values.byteLength)));
    }
    expect(Buffer.compare(acts.data, Buffer.concat(parts)), layer.name).toBe(0);
  }
}

describe('exportSnapshot', () => {
  it('exportSnapshot of a float32 baseline writes every layer as Sonde reads it, with coordinates and axis names', async () => {
    const out = join(dir, 'x-base');
    const result = await exportSnapshot({ snapshot: base, out });
    const description = JSON.parse(readFileSync(join(out, 'export.json'), 'utf8')) as ExportDescription;
    expect(description.complete).toBe(true);
    expect(description.layers.map((l) => l.name)).toEqual(openSnapshot(base).manifest.layers.map((l) => l.name));
    expect(description.modulation).toBeNull();
    expect(description.stimuli.index).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9]);
    const feature = description.layers.find((l) => l.shape.length === 3)!;
    expect(feature.dims).toEqual(['stimulus', 'channel', 'y', 'x']);
    expect(result.fromBaseline).toBe(0);
    await expectSameAsReader(base, out, description);
  });

  it('exportSnapshot of a modulated snapshot reads its upstream layers through the baseline and records the modulation', async () => {
    const manifest = openSnapshot(mod).manifest;
    const upstream = manifest.layers.filter((l) => l.from === 'baseline');
    expect(upstream.length).toBeGreaterThan(0); // the case the README's old snippet failed on
    const out = join(dir, 'x-mod');
    const result = await exportSnapshot({ snapshot: mod, out });
    expect(result.fromBaseline).toBe(upstream.length);
    const description = result.description;
    expect(description.modulation).toEqual(manifest.modulation);
    expect(description.layers.filter((l) => l.source === 'baseline').map((l) => l.name)).toEqual(upstream.map((l) => l.name));
    await expectSameAsReader(mod, out, description);
  });

  it('exportSnapshot keeps float16 activations as their stored bits (<f2), widens them exactly with float32, and writes channel means only for layers kept that way', async () => {
    const out = join(dir, 'x-half');
    const result = await exportSnapshot({ snapshot: half, out });
    expect(result.description.layers.every((l) => l.activation?.dtype === 'float16')).toBe(true);
    await expectSameAsReader(half, out, result.description);
    const widened = await exportSnapshot({ snapshot: half, out: join(dir, 'x-half32'), float32: true });
    expect(widened.description.layers.every((l) => l.dtype === 'float16' && l.activation?.dtype === 'float32')).toBe(true);
    await expectSameAsReader(half, join(dir, 'x-half32'), widened.description);
    const means = join(dir, 'means');
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: means, layers: 'all', batch: 4, threads: 1, keep: 'channels' });
    const onlyMeans = await exportSnapshot({ snapshot: means, out: join(dir, 'x-means') });
    expect(onlyMeans.description.layers.every((l) => l.activation === null && l.keep === 'channels')).toBe(true);
    await expectSameAsReader(means, join(dir, 'x-means'), onlyMeans.description);
  });

  it('exportSnapshot with a selector exports only the chosen layers, and names the closest layer for a typo', async () => {
    const out = join(dir, 'x-sel');
    const result = await exportSnapshot({ snapshot: base, out, layers: 'relu0' });
    expect(result.description.layers.map((l) => l.name)).toEqual(['relu0']);
    await expect(exportSnapshot({ snapshot: base, out: join(dir, 'x-typo'), layers: 'relu9' })).rejects.toThrow(/relu9.*not found/);
  });

  it('exportSnapshot refuses a complete export without force, a foreign folder even with force, and the snapshot itself', async () => {
    const out = join(dir, 'x-again');
    await exportSnapshot({ snapshot: base, out, layers: 'relu0' });
    await expect(exportSnapshot({ snapshot: base, out })).rejects.toThrow(/already holds a complete export/);
    const again = await exportSnapshot({ snapshot: base, out, force: true });
    expect(again.description.layers.length).toBeGreaterThan(1);
    const foreign = join(dir, 'x-foreign');
    mkdirSync(foreign);
    writeFileSync(join(foreign, 'notes.txt'), 'mine');
    await expect(exportSnapshot({ snapshot: base, out: foreign, force: true })).rejects.toThrow(/not an export folder \(found notes\.txt\).*even with --force/);
    expect(readFileSync(join(foreign, 'notes.txt'), 'utf8')).toBe('mine');
    await expect(exportSnapshot({ snapshot: base, out: join(base, 'inside') })).rejects.toThrow(/lies inside SNAPSHOT/);
    // a modulated snapshot's baseline is an input too
    await expect(exportSnapshot({ snapshot: mod, out: join(base, 'npy') })).rejects.toThrow(/lies inside the baseline of/);
  });

  it('exportSnapshot refuses a damaged layer file (SHA-256 check) and leaves no array of that layer', async () => {
    const copy = join(dir, 'damaged');
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: copy, layers: 'relu0', batch: 4, threads: 1 });
    const file = join(copy, openSnapshot(copy).layer('relu0').file);
    const bytes = readFileSync(file);
    bytes[bytes.length >> 1] ^= 0x01; // one bit in the middle of the file (inside a batch's activations)
    writeFileSync(file, bytes);
    const out = join(dir, 'x-damaged');
    await expect(exportSnapshot({ snapshot: copy, out })).rejects.toThrow(/SHA-256/);
    const description = JSON.parse(readFileSync(join(out, 'export.json'), 'utf8')) as ExportDescription;
    expect(description.complete).toBe(false);
    expect(description.layers).toEqual([]);
    // an interrupted export is replaced without --force
    await expect(exportSnapshot({ snapshot: base, out, layers: 'relu0' })).resolves.toBeDefined();
  });

  it('exportSnapshot of a shard labels its rows with their global stimulus indices', async () => {
    const shard = join(dir, 'shard2');
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: shard, layers: 'relu0+logits', batch: 2, threads: 1, shard: { index: 2, count: 2 } });
    const snap = openSnapshot(shard);
    expect(snap.firstIndex).toBe(5);
    const result = await exportSnapshot({ snapshot: shard, out: join(dir, 'x-shard') });
    expect(result.description.stimuli.firstIndex).toBe(5);
    expect(result.description.stimuli.index).toEqual([5, 6, 7, 8, 9]);
    await expectSameAsReader(shard, join(dir, 'x-shard'), result.description);
  });

  it('exportSnapshot into a folder another export holds (its lock) is refused and deletes nothing there', async () => {
    const out = join(dir, 'x-locked');
    await exportSnapshot({ snapshot: base, out, layers: 'relu0' });
    const description = JSON.parse(readFileSync(join(out, 'export.json'), 'utf8')) as ExportDescription;
    writeFileSync(join(out, 'export.json'), JSON.stringify({ ...description, complete: false })); // as while it runs
    const before = readdirSync(join(out, 'layers'));
    const lock = acquireLock(out);
    try {
      await expect(exportSnapshot({ snapshot: base, out, layers: 'relu0' })).rejects.toThrow(/lock|held|in use|running/i);
      expect(readdirSync(join(out, 'layers'))).toEqual(before);
      expect(existsSync(join(out, 'export.json'))).toBe(true);
    } finally {
      lock.release();
    }
  });

  it('sonde export prints what it wrote and needs --out', async () => {
    const out = join(dir, 'x-cli');
    const upstream = openSnapshot(mod).manifest.layers.find((l) => l.from === 'baseline')!.name;
    const ok = await runSonde(['export', mod, '--out', out, '--layers', upstream]);
    expect(ok.code).toBe(0);
    expect(ok.stdout).toMatch(/exported 1 layers × 10 stimuli .* 1 layers read from its baseline/);
    const missing = await runSonde(['export', mod]);
    expect(missing.code).toBe(2);
    expect(missing.stderr).toMatch(/needs --out/);
  });
});

describe('exportSnapshot (compressed snapshots)', () => {
  it('exportSnapshot of a ZSTD-compressed snapshot writes the .npy bytes of the uncompressed recording\'s export (the reader hands out the stored values whatever the codec)', async () => {
    const zstdSnap = join(dir, 'base-zstd');
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: zstdSnap, layers: 'all', batch: 4, threads: 1, compress: 'zstd' });
    const zstd = await exportSnapshot({ snapshot: zstdSnap, out: join(dir, 'base-zstd-npy') });
    const plain = await exportSnapshot({ snapshot: base, out: join(dir, 'base-plain-npy') });
    expect(zstd.description.layers.map((l) => l.name)).toEqual(plain.description.layers.map((l) => l.name));
    zstd.description.layers.forEach((layer, i) => {
      const other = plain.description.layers[i]!;
      expect(layer.activation!.sha256, layer.name).toBe(other.activation!.sha256);
      expect(layer.channelMeans.sha256, layer.name).toBe(other.channelMeans.sha256);
      expect(readFileSync(join(zstd.folder, layer.activation!.file)).equals(readFileSync(join(plain.folder, other.activation!.file)))).toBe(true);
    });
  });
});
