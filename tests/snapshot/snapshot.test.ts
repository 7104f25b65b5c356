/**
 * openSnapshot across snapshot formats:
 * - format 3 channel means come from the layer's means file alone: they are read and verified with the
 *   full layer file gone (exact property: nothing of it is needed), they equal the means of the recorded
 *   activations computed here in float64 (definition of a channel mean: the average over a channel's
 *   positions), and a damaged means file is refused;
 * - the committed format-2 fixture (tests/snapshot/fixtures/format2, written by commit 47e041f) reads
 *   as that build's reader read it: the SHA-256 of every layer's activations and channel means equals
 *   the one it recorded (expected.json), and `sonde check` finds it intact;
 * - a manifest of a newer format is refused in one line with the way out.
 */
import { copyFileSync, cpSync, readFileSync, renameSync, writeFileSync } from 'node:fs';
import { createHash } from 'node:crypto';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { FORMAT_VERSION, readManifest } from '../../src/snapshot/manifest.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

const FORMAT2 = join(import.meta.dirname, 'fixtures', 'format2');

let dir: string;

beforeAll(async () => {
  dir = tempFolder('sonde-snapshot-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 12 }));
  const stim = writeStimuliNpy(dir, [10, 3, 16, 16], 13);
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'zstd'), layers: 'all', batch: 4, threads: 1, compress: 'zstd' });
}, 60_000);

describe('openSnapshot (format 3)', () => {
  it('openSnapshot records format 3 with a means file per full layer, and readChannelMeans equals the float64 means of the recorded activations', async () => {
    const snap = openSnapshot(join(dir, 'zstd'));
    expect(snap.manifest.format).toBe(FORMAT_VERSION);
    expect(FORMAT_VERSION).toBe(3);
    for (const entry of snap.manifest.layers) {
      expect(entry.means?.file).toBe(entry.file.replace(/\.arrow$/, '.means.arrow'));
      const { channels, spatial } = snap.layerGeometry(entry.name);
      const means = await snap.readChannelMeans(entry.name);
      const n = snap.manifest.stimuli.count;
      const expected = new Float32Array(n * channels);
      for await (const batch of snap.readLayer(entry.name)) {
        for (let r = 0; r < batch.rows; r++) {
          for (let c = 0; c < channels; c++) {
            let sum = 0;
            // features on axis 0 (C×H×W): i = (r*C + c)*S + s
            for (let s = 0; s < spatial; s++) sum += batch.activation![(r * channels + c) * spatial + s]!;
            expected[batch.index[r]! * channels + c] = sum / spatial;
          }
        }
      }
      expect(Buffer.compare(Buffer.from(means.buffer), Buffer.from(expected.buffer)), entry.name).toBe(0);
    }
  });

  it('openSnapshot readChannelMeans needs no byte of the layer file: with it moved away the means still read, activations do not', async () => {
    const copy = join(dir, 'moved');
    cpSync(join(dir, 'zstd'), copy, { recursive: true });
    const before = openSnapshot(copy);
    const entry = before.manifest.layers.find((l) => l.name === 'relu1')!;
    const expected = await before.readChannelMeans(entry.name);
    renameSync(join(copy, entry.file), join(dir, 'relu1-away.arrow'));
    const snap = openSnapshot(copy);
    expect(Buffer.compare(Buffer.from((await snap.readChannelMeans(entry.name)).buffer), Buffer.from(expected.buffer))).toBe(0);
    let rows = 0;
    for await (const batch of snap.readLayer(entry.name, { activation: false, range: [3, 9] })) rows += batch.rows;
    expect(rows).toBe(6);
    await expect(async () => {
      for await (const _ of snap.readLayer(entry.name)) void _;
    }).rejects.toThrow(/cannot be opened|does not exist|is not a regular file|no such file/i);
  });

  it('openSnapshot refuses channel means from a means file whose bytes changed after recording', async () => {
    const copy = join(dir, 'damaged-means');
    cpSync(join(dir, 'zstd'), copy, { recursive: true });
    const entry = openSnapshot(copy).manifest.layers.find((l) => l.name === 'relu0')!;
    const path = join(copy, entry.means!.file);
    const bytes = readFileSync(path);
    bytes[bytes.length - 40] ^= 0x04;
    writeFileSync(path, bytes);
    await expect(openSnapshot(copy).readChannelMeans(entry.name)).rejects.toThrow(/does not match the SHA-256 in the manifest/);
  });
});

describe('openSnapshot (format 2)', () => {
  it('openSnapshot reads the committed format-2 snapshots exactly as the format-2 build read them (SHA-256 of activations and channel means)', async () => {
    const expected = JSON.parse(readFileSync(join(FORMAT2, 'expected.json'), 'utf8')) as Record<string, Record<string, { activation: string | null; channelMeans: string }>>;
    for (const name of ['base', 'half', 'means', 'mod']) {
      const snap = openSnapshot(join(FORMAT2, name));
      expect(snap.manifest.format).toBe(2);
      for (const entry of snap.manifest.layers) {
        expect(entry.means).toBeUndefined();
        const activation = createHash('sha256');
        const means = createHash('sha256');
        for await (const b of snap.readLayer(entry.name)) {
          if (b.activation) activation.update(new Uint8Array(b.activation.buffer, b.activation.byteOffset, b.activation.byteLength));
          means.update(new Uint8Array(b.channelMeans.buffer, b.channelMeans.byteOffset, b.channelMeans.byteLength));
        }
        const want = expected[name]![entry.name]!;
        expect(entry.keep === 'full' ? activation.digest('hex') : null, `${name} ${entry.name}`).toBe(want.activation);
        expect(means.digest('hex'), `${name} ${entry.name}`).toBe(want.channelMeans);
        const all = await snap.readChannelMeans(entry.name);
        expect(createHash('sha256').update(new Uint8Array(all.buffer)).digest('hex')).toBe(want.channelMeans);
      }
      const report = await checkSnapshot(join(FORMAT2, name));
      expect(report.problems).toEqual([]);
    }
  });

  it('readManifest refuses a manifest of a newer format in one line naming the way out', () => {
    const copy = join(dir, 'newer');
    cpSync(join(FORMAT2, 'base'), copy, { recursive: true });
    const manifest = JSON.parse(readFileSync(join(copy, 'manifest.json'), 'utf8')) as { format: number };
    manifest.format = FORMAT_VERSION + 1;
    writeFileSync(join(copy, 'manifest.json'), JSON.stringify(manifest));
    expect(() => readManifest(copy)).toThrow(/has format 4; this Sonde reads formats 2 and 3/);
    try {
      readManifest(copy);
    } catch (error) {
      expect((error as { hint?: string }).hint).toMatch(/sonde export/);
    }
    copyFileSync(join(FORMAT2, 'base', 'manifest.json'), join(copy, 'manifest.json'));
    expect(readManifest(copy).format).toBe(2);
  });

  it('readManifest refuses a means field in a format-2 manifest, on a channels-only layer, or naming another layer\'s file', () => {
    const folder = join(dir, 'means-fields');
    cpSync(join(dir, 'zstd'), folder, { recursive: true });
    const original = readFileSync(join(folder, 'manifest.json'), 'utf8');
    const edit = (change: (m: { format: number; layers: Array<{ file: string; keep: string; means?: { file: string } }> }) => void) => {
      const m = JSON.parse(original);
      change(m);
      writeFileSync(join(folder, 'manifest.json'), JSON.stringify(m));
    };
    edit((m) => (m.format = 2));
    expect(() => readManifest(folder)).toThrow(/layers\[0\]\.means is a format-3 field, but the manifest says format 2/);
    edit((m) => (m.layers[0]!.keep = 'channels'));
    expect(() => readManifest(folder)).toThrow(/layers\[0\]\.means is set, but the layer keeps channel means only/);
    edit((m) => (m.layers[1]!.means!.file = m.layers[0]!.file));
    expect(() => readManifest(folder)).toThrow(/layers\[1\]\.means\.file .* is used by two files/);
    edit((m) => (m.layers[1]!.means!.file = '../outside.arrow'));
    expect(() => readManifest(folder)).toThrow(/points outside the snapshot folder/);
    writeFileSync(join(folder, 'manifest.json'), original);
    expect(readManifest(folder).format).toBe(3);
  });
});
