/**
 * `sonde check` on a layer's channel-means file (src/snapshot/means-check.ts, check.ts): an intact
 * compressed snapshot passes; a means file that is missing, changed after recording, or — rewritten with
 * its manifest hash updated — disagrees with the layer file by one value is reported in one line naming
 * the stimulus and channel; a layer file stored otherwise than the manifest's `compression` is reported.
 * Exact properties: the check compares every row bit for bit, so one changed float is found.
 */
import { cpSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { LayerFileWriter } from '../../src/snapshot/layer-file.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;

beforeAll(async () => {
  dir = tempFolder('sonde-means-check-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 14 }));
  const stim = writeStimuliNpy(dir, [9, 3, 16, 16], 15);
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'snap'), layers: 'relu0+relu1', batch: 4, threads: 1, compress: 'lz4' });
}, 60_000);

function copy(name: string): string {
  const folder = join(dir, name);
  cpSync(join(dir, 'snap'), folder, { recursive: true });
  return folder;
}

function editManifest(folder: string, edit: (m: { layers: Array<{ name: string; compression?: string; means?: { file: string; sha256: string; bytes: number } }> }) => void): void {
  const path = join(folder, 'manifest.json');
  const manifest = JSON.parse(readFileSync(path, 'utf8'));
  edit(manifest);
  writeFileSync(path, `${JSON.stringify(manifest, null, 2)}\n`);
}

describe('meansFileProblems', () => {
  it('checkSnapshot finds a compressed snapshot with its means files intact and counts their bytes', async () => {
    const report = await checkSnapshot(join(dir, 'snap'));
    expect(report.problems).toEqual([]);
    const snap = openSnapshot(join(dir, 'snap'));
    expect(report.checked.bytes).toBe(snap.manifest.layers.reduce((sum, l) => sum + l.bytes! + l.means!.bytes, 0));
  });

  it('checkSnapshot reports a missing means file and one whose bytes changed', async () => {
    const missing = copy('missing');
    const entry = openSnapshot(missing).layer('relu1');
    rmSync(join(missing, entry.means!.file));
    expect((await checkSnapshot(missing)).problems).toEqual([{ subject: entry.means!.file, message: 'is missing (channel means of layer "relu1")' }]);
    const changed = copy('changed');
    const path = join(changed, entry.means!.file);
    const bytes = readFileSync(path);
    bytes[bytes.length >> 1] ^= 0x10;
    writeFileSync(path, bytes);
    expect((await checkSnapshot(changed)).problems).toEqual([{ subject: entry.means!.file, message: 'SHA-256 differs from the manifest (the file changed after recording)' }]);
  });

  it('checkSnapshot reports a means file that disagrees with the layer file by one value, naming stimulus and channel', async () => {
    const folder = copy('disagree');
    const snap = openSnapshot(folder);
    const entry = snap.layer('relu0');
    const means = await snap.readChannelMeans('relu0');
    const channels = snap.layerGeometry('relu0').channels;
    const original = means[6 * channels + 2]!;
    means[6 * channels + 2] = original + 0.25;
    const writer = new LayerFileWriter(join(folder, entry.means!.file), { name: entry.name, shape: entry.shape, dtype: entry.dtype, keep: 'channels' });
    rmSync(join(folder, entry.means!.file));
    writer.writeColumns(0, 9, means, null);
    const written = writer.finish();
    editManifest(folder, (m) => Object.assign(m.layers.find((l) => l.name === 'relu0')!.means!, { sha256: written.sha256, bytes: written.bytes }));
    const problems = (await checkSnapshot(folder)).problems;
    expect(problems).toEqual([{ subject: entry.means!.file, message: `does not agree with the layer file: stimulus 6, channel 2 holds ${Math.fround(original + 0.25)}, the layer file ${original}` }]);
  });

  it('checkSnapshot reports a layer file stored otherwise than the manifest says', async () => {
    const folder = copy('codec');
    editManifest(folder, (m) => (m.layers[0]!.compression = 'zstd'));
    const problems = (await checkSnapshot(folder)).problems;
    const entry = openSnapshot(folder).manifest.layers[0]!;
    expect(problems).toEqual([{ subject: entry.file, message: 'stores record batch 0 compressed with lz4, the manifest says compressed with zstd' }]);
  });
});
