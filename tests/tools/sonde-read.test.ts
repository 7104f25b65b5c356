/**
 * tools/python/sonde_read.py (the Python reader shipped with Sonde) against Sonde's own reader
 * (openSnapshot/readLayer): run with Debian's /usr/bin/python3 and python3-numpy (and python3-xarray for
 * the DataArray checks; `.ci/run` installs both), it must hand out the same values, bit for bit, for a
 * float32 baseline, a modulated snapshot whose upstream layers live in the baseline, a float16 snapshot
 * (widened by NumPy's own float16, independently of Sonde's conversion), a channel-means-only snapshot,
 * and an export of the modulated snapshot (memory-mapped .npy); compressed snapshots (LZ4 frame and ZSTD,
 * decompressed by Debian's python3-lz4 / python3-zstandard, independent implementations of the codecs)
 * and the committed format-2 fixture the same way. Skipped, saying why, where /usr/bin/python3 has no
 * NumPy.
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, readFileSync, renameSync, symlinkSync, writeFileSync } from 'node:fs';
import { isAbsolute, join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { axisNames } from '../../src/export/export-description.js';
import { exportSnapshot } from '../../src/export/export-snapshot.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

const PYTHON = '/usr/bin/python3';
const SCRIPT = join(import.meta.dirname, 'dump_sonde_read.py');
const probe = spawnSync(PYTHON, ['-c', 'import numpy'], { encoding: 'utf8' });
const hasNumpy = probe.status === 0;
if (!hasNumpy) console.warn(`sonde-read tests skipped: ${PYTHON} with NumPy is not available (apt-get install python3-numpy python3-xarray)`);
const hasXarray = hasNumpy && spawnSync(PYTHON, ['-c', 'import xarray'], { encoding: 'utf8' }).status === 0;
/** A Python with NumPy and pyarrow for the pyarrow engine (not packaged for Debian 12: CI skips it; SONDE_PYARROW_PYTHON names one). */
const pyarrowPython = [process.env['SONDE_PYARROW_PYTHON'], PYTHON].find((p) => p !== undefined && p !== '' && spawnSync(p, ['-c', 'import numpy, pyarrow']).status === 0);

let dir: string;
let folders: string[];

interface Dumped {
  xarray: boolean;
  folders: Array<{
    kind: string;
    engine: string | null;
    ids: string[];
    labels: string[][];
    index: number[];
    modulated: boolean;
    layers: Array<{ name: string; source: string; meansDataarray?: { dims: string[]; shape: number[]; equal: boolean }; dtype?: string; shape?: number[]; memmap?: boolean; meansDtype: string; dataarray?: { dims: string[]; shape: number[]; stimulus: number[]; id: string[]; labels: string[][]; channel: number[]; layer: string; modulation: unknown; equal: boolean } }>;
  }>;
}

function runDump(engine: string, inputs: string[], python = PYTHON): { out: string; status: number | null; stderr: string } {
  const out = tempFolder('sonde-py-');
  const result = spawnSync(python, [SCRIPT, out, engine, ...inputs], { encoding: 'utf8' });
  return { out, status: result.status, stderr: result.stderr };
}

async function expectSameAsSonde(run: { out: string; status: number | null; stderr: string }, sources = ['base', 'mod', 'half', 'means', 'mod'], exported = 4): Promise<void> {
  expect(run.status, run.stderr).toBe(0);
  const dumped = JSON.parse(readFileSync(join(run.out, 'summary.json'), 'utf8')) as Dumped;
  // the export reads as the snapshot it came from
  for (let k = 0; k < sources.length; k++) {
    const snap = openSnapshot(isAbsolute(sources[k]!) ? sources[k]! : join(dir, sources[k]!));
    const got = dumped.folders[k]!;
    expect(got.kind).toBe(k === exported ? 'export' : 'snapshot');
    expect(got.ids).toEqual(snap.stimuli.ids);
    expect(got.labels).toEqual(snap.stimuli.labels);
    expect(got.index).toEqual(snap.stimuli.ids.map((_, i) => snap.firstIndex + i));
    expect(got.modulated).toBe(snap.manifest.modulation !== null);
    expect(got.layers.map((l) => l.name)).toEqual(snap.manifest.layers.map((l) => l.name));
    for (let j = 0; j < got.layers.length; j++) {
      const entry = snap.manifest.layers[j]!;
      const layer = got.layers[j]!;
      expect(layer.source).toBe(entry.from === 'baseline' ? 'baseline' : 'snapshot');
      expect(layer.meansDtype).toBe('float32');
      const means = parseNpy(readFileSync(join(run.out, String(k), `${j}.means.npy`))).data as Float32Array;
      expect(Buffer.compare(Buffer.from(means.buffer), Buffer.from((await snap.readChannelMeans(entry.name)).buffer)), `${sources[k]} ${entry.name} means`).toBe(0);
      if (entry.keep === 'channels') {
        expect(layer.dtype).toBeUndefined();
        continue;
      }
      expect(layer.dtype).toBe(entry.dtype);
      expect(layer.shape).toEqual([snap.manifest.stimuli.count, ...entry.shape]);
      if (k === exported) expect(layer.memmap).toBe(true); // exports are memory-mapped
      const acts = parseNpy(readFileSync(join(run.out, String(k), `${j}.acts.npy`))).data as Float32Array;
      const expected: number[] = [];
      for await (const batch of snap.readLayer(entry.name)) for (const v of batch.activation!) expected.push(v);
      expect(Buffer.compare(Buffer.from(acts.buffer), Buffer.from(Float32Array.from(expected).buffer)), `${sources[k]} ${entry.name}`).toBe(0);
    }
  }
}

beforeAll(async () => {
  if (!hasNumpy) return;
  dir = tempFolder('sonde-read-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 9 }));
  const stim = writeStimuliNpy(dir, [9, 3, 16, 16], 21);
  const common = { model, stimuli: stim.npy, labels: stim.labels, threads: 1 } as const;
  await recordSnapshot({ ...common, layers: 'all', out: join(dir, 'base'), batch: 4 });
  await recordSnapshot({ ...common, layers: 'all', out: join(dir, 'half'), batch: 2, dtype: 'float16' });
  await recordSnapshot({ ...common, layers: 'all', out: join(dir, 'means'), batch: 4, keep: 'channels' });
  writeFileSync(join(dir, 'gain.json'), JSON.stringify({ site: 'relu1', kind: 'uniform', gain: 0.5 }));
  await recordModulated({ ...common, out: join(dir, 'mod'), batch: 4, modulate: join(dir, 'gain.json'), from: join(dir, 'base') });
  await exportSnapshot({ snapshot: join(dir, 'mod'), out: join(dir, 'mod-npy') });
  folders = ['base', 'mod', 'half', 'means', 'mod-npy'].map((f) => join(dir, f));
  await recordSnapshot({ ...common, layers: 'all', out: join(dir, 'lz4'), batch: 4, compress: 'lz4' });
  await recordSnapshot({ ...common, layers: 'all', out: join(dir, 'zstd'), batch: 4, compress: 'zstd' });
  await recordSnapshot({ ...common, layers: 'all', out: join(dir, 'half-zstd'), batch: 3, dtype: 'float16', compress: 'zstd' });
  await recordModulated({ ...common, out: join(dir, 'mod-zstd'), batch: 4, modulate: join(dir, 'gain.json'), from: join(dir, 'zstd') });
}, 60_000);

const codecsProbe = hasNumpy ? spawnSync(PYTHON, ['-c', 'import lz4.frame, zstandard'], { encoding: 'utf8' }) : null;
const hasCodecs = codecsProbe?.status === 0;
if (hasNumpy && !hasCodecs) console.warn(`sonde-read compressed-snapshot tests skipped: ${PYTHON} lacks lz4 or zstandard (apt-get install python3-lz4 python3-zstandard)`);
const FORMAT2 = join(import.meta.dirname, '..', 'snapshot', 'fixtures', 'format2');

describe.skipIf(!hasNumpy)('sonde_read.py', () => {
  it('sonde_read.open returns the values, stimuli and label sets openSnapshot reads, for baseline, modulated, float16, channel-means-only snapshots and an export', async () => {
    await expectSameAsSonde(runDump('numpy', folders));
  }, 60_000);

  it.skipIf(pyarrowPython === undefined)('sonde_read.open with engine pyarrow returns the values openSnapshot reads (run only where pyarrow is installed)', async () => {
    const run = runDump('pyarrow', folders, pyarrowPython);
    await expectSameAsSonde(run);
    const dumped = JSON.parse(readFileSync(join(run.out, 'summary.json'), 'utf8')) as Dumped;
    expect(dumped.folders.map((f) => f.engine)).toEqual(['pyarrow', 'pyarrow', 'pyarrow', 'pyarrow', null]);
  }, 60_000);

  it.skipIf(!hasXarray)('sonde_read dataarray labels the stimulus axis with index, id and label set, and names the axes stimulus, channel, y, x', () => {
    const run = runDump('numpy', [join(dir, 'mod'), join(dir, 'mod-npy')]);
    expect(run.status, run.stderr).toBe(0);
    const dumped = JSON.parse(readFileSync(join(run.out, 'summary.json'), 'utf8')) as Dumped;
    expect(dumped.xarray).toBe(true);
    const snap = openSnapshot(join(dir, 'mod'));
    for (const folder of dumped.folders) {
      for (const layer of folder.layers) {
        const entry = snap.layer(layer.name);
        const da = layer.dataarray!;
        expect(da.equal).toBe(true);
        expect(da.shape).toEqual([9, ...entry.shape]);
        expect(da.dims).toEqual(entry.shape.length === 3 ? ['stimulus', 'channel', 'y', 'x'] : ['stimulus', 'channel', ...entry.shape.slice(1).map((_, i) => `axis${i + 2}`)]);
        expect(da.stimulus).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8]);
        expect(da.id).toEqual(snap.stimuli.ids);
        expect(da.labels).toEqual(snap.stimuli.labels);
        expect(da.channel).toEqual(Array.from({ length: entry.shape[0]! }, (_, c) => c));
        expect(da.modulation).toEqual(snap.manifest.modulation);
        expect(layer.meansDataarray).toEqual({ dims: ['stimulus', 'channel'], shape: [9, entry.shape[0]!], equal: true });
      }
    }
  }, 60_000);

  it.skipIf(!hasCodecs)('sonde_read.open reads LZ4- and ZSTD-compressed snapshots (float32, float16, modulated from a compressed baseline) with the values openSnapshot reads', async () => {
    const sources = ['lz4', 'zstd', 'half-zstd', 'mod-zstd'];
    expect(openSnapshot(join(dir, 'zstd')).manifest.layers.every((l) => l.compression === 'zstd')).toBe(true);
    await expectSameAsSonde(runDump('numpy', sources.map((f) => join(dir, f))), sources, -1);
  }, 60_000);

  it.skipIf(!hasCodecs || pyarrowPython === undefined)('sonde_read.open with engine pyarrow (Arrow C++) reads the LZ4- and ZSTD-compressed snapshots with the values openSnapshot reads (run only where pyarrow is installed)', async () => {
    const sources = ['lz4', 'zstd', 'half-zstd', 'mod-zstd'];
    const run = runDump('pyarrow', sources.map((f) => join(dir, f)), pyarrowPython);
    await expectSameAsSonde(run, sources, -1);
    const dumped = JSON.parse(readFileSync(join(run.out, 'summary.json'), 'utf8')) as Dumped;
    expect(dumped.folders.map((f) => f.engine)).toEqual(['pyarrow', 'pyarrow', 'pyarrow', 'pyarrow']);
  }, 60_000);

  it('sonde_read.open reads token and channels-last layers (PyTorch-exported ViT and NHWC fixtures) with the channel means openSnapshot reads, per feature', async () => {
    const reference = join(import.meta.dirname, '..', 'reference', 'fixtures');
    const vit = join(dir, 'vit');
    const nhwc = join(dir, 'nhwc');
    await recordSnapshot({ model: join(reference, 'attention', 'vit-opset14.onnx'), stimuli: join(reference, 'attention', 'inputs.npy'), out: vit, batch: 2, threads: 1 });
    await recordSnapshot({ model: join(reference, 'layouts', 'channels-last.onnx'), stimuli: join(reference, 'layouts', 'channels-last-inputs.npy'), out: nhwc, layers: 'all', batch: 2, threads: 1 });
    await exportSnapshot({ snapshot: vit, out: join(dir, 'vit-npy') });
    const run = runDump('numpy', [vit, nhwc, join(dir, 'vit-npy')]);
    await expectSameAsSonde(run, [vit, nhwc, vit], 2);
    if (!hasXarray) return;
    const dumped = JSON.parse(readFileSync(join(run.out, 'summary.json'), 'utf8')) as Dumped;
    const dims = (k: number, name: string) => dumped.folders[k]!.layers.find((l) => l.name === name)!.dataarray!.dims;
    expect(dims(0, '/encoder/layers/encoder_layer_0/Add_1_output_0')).toEqual(['stimulus', 'token', 'feature']);
    expect(dims(2, '/encoder/layers/encoder_layer_0/Add_1_output_0')).toEqual(['stimulus', 'token', 'feature']);
    expect(dims(1, '/relu/Relu_output_0')).toEqual(['stimulus', 'y', 'x', 'channel']);
  }, 60_000);

  it('sonde_read.open reads the committed format-2 snapshots (written before compression and means files) with the values openSnapshot reads', async () => {
    const sources = ['base', 'half', 'means', 'mod'].map((f) => join(FORMAT2, f));
    await expectSameAsSonde(runDump('numpy', sources), sources, -1);
  }, 60_000);

  it('sonde_read refuses a compressed snapshot in one line naming the package and `sonde export` when the codec module is missing', () => {
    const code = `import sys; sys.modules['zstandard'] = None\nimport sonde_read\nsonde_read.open(sys.argv[1]).activations(sys.argv[2])`;
    const name = openSnapshot(join(dir, 'zstd')).manifest.layers[0]!.name;
    const result = spawnSync(PYTHON, ['-c', code, join(dir, 'zstd'), name], { encoding: 'utf8', env: { ...process.env, PYTHONPATH: join(import.meta.dirname, '..', '..', 'tools', 'python') } });
    expect(result.status).not.toBe(0);
    expect(result.stderr).toMatch(/SondeReadError: .* is compressed with zstd, and Python module zstandard is not installed: install it \(Debian python3-zstandard\), or convert the snapshot with `sonde export`/);
  });

  it('sonde_read reads channel means from the means file without the layer file (format 3)', () => {
    const copy = join(dir, 'means-only-read');
    mkdirSync(copy);
    const snap = openSnapshot(join(dir, 'zstd'));
    const entry = snap.manifest.layers.find((l) => l.keep === 'full')!;
    // the layer file is gone: channel means still read (and verified), activations refused
    const code = `import sys, os, shutil\nimport sonde_read\nrec = sonde_read.open(sys.argv[1])\nos.rename(rec._file(rec.layer(sys.argv[2])), sys.argv[3])\ntry:\n  m = rec.channel_means(sys.argv[2]); print(m.shape)\nfinally:\n  os.rename(sys.argv[3], rec._file(rec.layer(sys.argv[2])))`;
    const result = spawnSync(PYTHON, ['-c', code, join(dir, 'zstd'), entry.name, join(copy, 'moved.arrow')], { encoding: 'utf8', env: { ...process.env, PYTHONPATH: join(import.meta.dirname, '..', '..', 'tools', 'python') } });
    expect(result.status, result.stderr).toBe(0);
    expect(result.stdout.trim()).toBe(`(9, ${snap.layerGeometry(entry.name).channels})`);
  });

  it('sonde_read refuses a layer file whose bytes differ from its manifest SHA-256, as Sonde does', async () => {
    const copy = join(dir, 'damaged');
    await recordSnapshot({ model: join(dir, 'net.onnx'), stimuli: join(dir, 'stimuli.npy'), labels: join(dir, 'labels.csv'), out: copy, layers: 'relu0', batch: 4, threads: 1 });
    const file = join(copy, openSnapshot(copy).layer('relu0').file);
    const bytes = readFileSync(file);
    bytes[bytes.length >> 1] ^= 0x01;
    writeFileSync(file, bytes);
    const run = runDump('numpy', [copy]);
    expect(run.status).not.toBe(0);
    expect(run.stderr).toMatch(/SondeReadError: layer file of 'relu0':.*does not have the SHA-256 its manifest lists/);
  }, 60_000);
  it('sonde_read.axis_names follows the same rule as sonde export (axisNames) for ranks 0 to 5', () => {
    const result = spawnSync(PYTHON, ['-c', 'import json, sonde_read; print(json.dumps([sonde_read.axis_names(r) for r in range(6)]))'], { encoding: 'utf8', env: { ...process.env, PYTHONPATH: join(import.meta.dirname, '..', '..', 'tools', 'python') } });
    expect(result.status, result.stderr).toBe(0);
    expect(JSON.parse(result.stdout)).toEqual([0, 1, 2, 3, 4, 5].map(axisNames));
  });

  it('sonde_read refuses a layer file that is a link leading out of the snapshot folder, as Sonde does', async () => {
    const copy = join(dir, 'linked');
    await recordSnapshot({ model: join(dir, 'net.onnx'), stimuli: join(dir, 'stimuli.npy'), labels: join(dir, 'labels.csv'), out: copy, layers: 'relu0', batch: 4, threads: 1 });
    const file = join(copy, openSnapshot(copy).layer('relu0').file);
    mkdirSync(join(dir, 'elsewhere'));
    renameSync(file, join(dir, 'elsewhere', 'relu0.arrow'));
    symlinkSync(join(dir, 'elsewhere', 'relu0.arrow'), file); // same bytes: only the link check can refuse it
    const run = runDump('numpy', [copy]);
    expect(run.status).not.toBe(0);
    expect(run.stderr).toMatch(/SondeReadError: layer 'relu0' file .* is a link that leads out of/);
  }, 60_000);
});
