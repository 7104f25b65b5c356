import { createHash } from 'node:crypto';
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import pl from 'nodejs-polars';
import sharp from 'sharp';
import { tableFromIPC } from 'apache-arrow';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { loadModel } from '../../src/graph/load-model.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { formatNpy, parseNpy } from '../../src/stimuli/npy.js';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, externalise, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let folder: string;
let modelPath: string;
let stimuli: { npy: string; labels: string };

beforeAll(() => {
  folder = tempFolder();
  modelPath = join(folder, 'tiny.onnx');
  writeFileSync(modelPath, buildTinyNet({ bias: true }));
  stimuli = writeStimuliNpy(folder, [11, 3, 16, 16]);
});

describe('recordSnapshot', () => {
  it('recordSnapshot(npy) writes a complete snapshot whose activations equal a direct runtime run', async () => {
    const out = join(folder, 'snap-a');
    const summary = await recordSnapshot({ model: modelPath, stimuli: stimuli.npy, labels: stimuli.labels, out, batch: 4, layers: 'all' });
    expect(summary.stimuli).toBe(11);
    const snap = openSnapshot(out);
    expect(snap.manifest.complete).toBe(true);
    expect(snap.stimuli.labels[2]).toEqual(['cat', 'dog']);
    expect(snap.categories).toEqual(['cat', 'dog']);
    // direct run of the unmodified model with the same tensors exposed, one batch of all 11
    const model = loadModel(modelPath);
    const names = snap.manifest.layers.map((l) => l.name);
    const session = await createNetworkSession(exposeTensors(model, names), { threads: 1 });
    const input = parseNpy(readFileSync(stimuli.npy)).data as Float32Array;
    const direct = await session.run({ input: { data: input, dims: [11, 3, 16, 16] } }, names);
    await session.close();
    for (const layer of snap.manifest.layers) {
      const got: number[] = [];
      for await (const batch of snap.readLayer(layer.name)) got.push(...batch.activation!);
      const want = direct[layer.name]!.data;
      expect(got.length).toBe(want.length);
      let worst = 0;
      for (let i = 0; i < want.length; i++) worst = Math.max(worst, Math.abs(got[i]! - want[i]!) / (Math.abs(want[i]!) + 1e-6));
      expect(worst, layer.name).toBeLessThan(1e-5); // batch 4 vs batch 11 may differ in the last bits
    }
  });

  it('recordSnapshot writes channel_mean equal to the spatial mean of activation (float64 check)', async () => {
    const snap = openSnapshot(join(folder, 'snap-a'));
    const layer = snap.manifest.layers.find((l) => l.shape.length === 3)!;
    const { channels, spatial } = snap.layerGeometry(layer.name);
    for await (const batch of snap.readLayer(layer.name)) {
      for (let r = 0; r < batch.rows; r++) {
        for (let c = 0; c < channels; c++) {
          let sum = 0;
          for (let s = 0; s < spatial; s++) sum += batch.activation![(r * channels + c) * spatial + s]!;
          expect(batch.channelMeans[r * channels + c]).toBeCloseTo(sum / spatial, 5);
        }
      }
    }
  });

  it('recordSnapshot files are read by nodejs-polars with the same numbers as apache-arrow', async () => {
    const snap = openSnapshot(join(folder, 'snap-a'));
    for (const layer of snap.manifest.layers) {
      const path = join(snap.folder, layer.file);
      const bytes = readFileSync(path);
      const frame = pl.readIPC(bytes);
      const table = tableFromIPC(bytes);
      expect(frame.height).toBe(11);
      expect(frame.columns).toEqual(['index', 'channel_mean', 'activation']);
      const polarsRow = frame.getColumn('activation').toArray()[5] as { toArray?: () => number[] } | number[];
      const polarsValues = Array.isArray(polarsRow) ? polarsRow : Array.from((polarsRow as { toArray: () => number[] }).toArray());
      const arrowValues = Array.from((table.getChild('activation')!.get(5) as { toArray(): Float32Array }).toArray());
      expect(polarsValues).toEqual(arrowValues);
      expect(Array.from(frame.getColumn('index').toArray() as number[])).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10]);
    }
    const stimuliFrame = pl.readIPC(readFileSync(join(snap.folder, 'stimuli.arrow')));
    expect(stimuliFrame.columns).toEqual(['index', 'id', 'labels', 'sha256']);
    expect(stimuliFrame.height).toBe(11);
  });

  it('recordSnapshot manifest hashes match the files and the activation field carries the shape', async () => {
    const snap = openSnapshot(join(folder, 'snap-a'));
    for (const layer of snap.manifest.layers) {
      const bytes = readFileSync(join(snap.folder, layer.file));
      expect(layer.sha256).toBe(createHash('sha256').update(bytes).digest('hex'));
      const table = tableFromIPC(bytes);
      const field = table.schema.fields.find((f) => f.name === 'activation')!;
      expect(JSON.parse(field.metadata.get('sonde.shape')!)).toEqual(layer.shape);
    }
    expect(snap.manifest.stimuli.digest).toMatch(/^[0-9a-f]{64}$/);
  });

  it('recordSnapshot --dtype float16 stores activations within float16 precision', async () => {
    const out = join(folder, 'snap-f16');
    await recordSnapshot({ model: modelPath, stimuli: stimuli.npy, out, dtype: 'float16', batch: 5 });
    const half = openSnapshot(out);
    const full = openSnapshot(join(folder, 'snap-a'));
    const name = half.manifest.layers[0]!.name;
    const a: number[] = [];
    const b: number[] = [];
    for await (const batch of half.readLayer(name)) a.push(...batch.activation!);
    for await (const batch of full.readLayer(name)) b.push(...batch.activation!);
    for (let i = 0; i < a.length; i++) expect(Math.abs(a[i]! - b[i]!)).toBeLessThanOrEqual(Math.abs(b[i]!) * 2 ** -11 + 2 ** -24);
    expect(pl.readIPC(readFileSync(join(half.folder, half.manifest.layers[0]!.file))).height).toBe(11);
  });

  it('recordSnapshot --keep channels writes only index and channel_mean', async () => {
    const out = join(folder, 'snap-ch');
    await recordSnapshot({ model: modelPath, stimuli: stimuli.npy, out, keep: 'channels' });
    const snap = openSnapshot(out);
    const table = tableFromIPC(readFileSync(join(snap.folder, snap.manifest.layers[0]!.file)));
    expect(table.schema.fields.map((f) => f.name)).toEqual(['index', 'channel_mean']);
    for await (const batch of snap.readLayer(snap.manifest.layers[0]!.name)) expect(batch.activation).toBeNull();
  });

  it('recordSnapshot reads image class folders and path,label CSV manifests', async () => {
    const images = join(folder, 'images');
    const rows: string[] = ['path,label'];
    for (const category of ['ball', 'cube']) {
      mkdirSync(join(images, category), { recursive: true });
      for (let i = 0; i < 3; i++) {
        const pixels = Buffer.alloc(20 * 20 * 3, category === 'ball' ? 40 * i : 250 - 40 * i);
        await sharp(pixels, { raw: { width: 20, height: 20, channels: 3 } }).png().toFile(join(images, category, `${i}.png`));
        rows.push(`${category}/${i}.png,${category}${i === 2 ? ';both' : ''}`);
      }
    }
    writeFileSync(join(images, 'list.csv'), `${rows.join('\n')}\n`);
    const fromFolder = await recordSnapshot({ model: modelPath, stimuli: images, out: join(folder, 'snap-img'), batch: 4 });
    const fromCsv = await recordSnapshot({ model: modelPath, stimuli: join(images, 'list.csv'), out: join(folder, 'snap-csv'), batch: 4 });
    expect(fromFolder.stimuli).toBe(6);
    expect(openSnapshot(fromFolder.folder).stimuli.ids).toEqual(['ball/0.png', 'ball/1.png', 'ball/2.png', 'cube/0.png', 'cube/1.png', 'cube/2.png']);
    expect(openSnapshot(fromCsv.folder).stimuli.labels[2]).toEqual(['ball', 'both']);
    // same pixels, same preprocessing → same digest of the network input
    expect(fromCsv.manifest.stimuli.digest).toBe(fromFolder.manifest.stimuli.digest);
  });

  it('recordSnapshot loads weights from external data files next to the model', async () => {
    const ext = join(folder, 'ext');
    mkdirSync(ext);
    writeFileSync(join(ext, 'tiny-ext.onnx'), externalise(buildTinyNet({ bias: true }), ext));
    const out = join(folder, 'snap-ext');
    await recordSnapshot({ model: join(ext, 'tiny-ext.onnx'), stimuli: stimuli.npy, out });
    const a = openSnapshot(out);
    const b = openSnapshot(join(folder, 'snap-a'));
    const la: number[] = [];
    const lb: number[] = [];
    for await (const batch of a.readLayer('logits')) la.push(...batch.activation!);
    for await (const batch of b.readLayer('logits')) lb.push(...batch.activation!);
    expect(la.length).toBe(lb.length);
    for (let i = 0; i < la.length; i++) expect(la[i]).toBeCloseTo(lb[i]!, 4);
  });

  it('recordSnapshot never marks an interrupted recording complete', async () => {
    const out = join(folder, 'snap-bad');
    const bad = writeStimuliNpy(join(folder), [4, 3, 16, 16], 9);
    await expect(recordSnapshot({ model: modelPath, stimuli: bad.npy, out, onProgress: () => { throw new Error('stop here'); } })).rejects.toThrow('stop here');
    const manifest = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8'));
    expect(manifest.complete).toBe(false);
    expect(manifest.error).toBe('stop here');
    expect(existsSync(join(out, 'stimuli.arrow'))).toBe(false);
    expect(() => openSnapshot(out)).toThrow(/incomplete/);
  });

  it('recordSnapshot with a run-bytes budget below one stimulus runs one stimulus per runtime call and writes the values of whole batches (same rows, one record batch per call)', async () => {
    const own = join(folder, 'split-stimuli');
    mkdirSync(own, { recursive: true });
    const eleven = writeStimuliNpy(own, [11, 3, 16, 16], 21);
    await recordSnapshot({ model: modelPath, stimuli: eleven.npy, out: join(folder, 'snap-whole'), batch: 4, layers: 'all' });
    const whole = openSnapshot(join(folder, 'snap-whole'));
    const out = join(folder, 'snap-split');
    await recordSnapshot({ model: modelPath, stimuli: eleven.npy, out, batch: 4, layers: 'all', runBytes: 1 });
    const split = openSnapshot(out);
    expect(split.manifest.run.batch).toBe(4);
    for (const layer of split.manifest.layers) {
      const a: number[] = [];
      const b: number[] = [];
      const ma: number[] = [];
      const mb: number[] = [];
      for await (const batch of whole.readLayer(layer.name)) {
        a.push(...batch.activation!);
        ma.push(...batch.channelMeans);
      }
      for await (const batch of split.readLayer(layer.name)) {
        b.push(...batch.activation!);
        mb.push(...batch.channelMeans);
      }
      expect(tableFromIPC(readFileSync(join(out, layer.file))).batches.length, layer.name).toBe(11);
      expect(b.length).toBe(a.length);
      // the runtime may round differently at another batch size (last bits only)
      for (let i = 0; i < a.length; i++) expect(Math.abs(a[i]! - b[i]!), layer.name).toBeLessThanOrEqual(1e-5 * (Math.abs(a[i]!) + 1e-3));
      for (let i = 0; i < ma.length; i++) expect(Math.abs(ma[i]! - mb[i]!), layer.name).toBeLessThanOrEqual(1e-5 * (Math.abs(ma[i]!) + 1e-3));
    }
  });

  it('recordSnapshot --dtype float16 casts in the graph to the same bits as IEEE 754 round-to-nearest-even in JavaScript, counts overflow to ±Infinity the same, and stores the means of the float32 values (computed in the graph)', async () => {
    // inputs large enough that some activations pass the float16 range (65504) and become ±Infinity
    const own = join(folder, 'half-stimuli');
    mkdirSync(own, { recursive: true });
    const rng = createRandom(11);
    const data = new Float32Array(6 * 3 * 16 * 16).map(() => (rng.uniform() - 0.3) * 40000);
    const npy = join(own, 'big.npy');
    writeFileSync(npy, formatNpy(data, [6, 3, 16, 16]));
    const inGraph = await recordSnapshot({ model: modelPath, stimuli: npy, out: join(folder, 'half-graph'), dtype: 'float16', batch: 4, layers: 'all' });
    const inScript = await recordSnapshot({ model: modelPath, stimuli: npy, out: join(folder, 'half-script'), dtype: 'float16', batch: 4, layers: 'all', float16InGraph: false });
    const full = await recordSnapshot({ model: modelPath, stimuli: npy, out: join(folder, 'half-full'), batch: 4, layers: 'all' });
    let overflowed = 0;
    for (const [i, layer] of inGraph.manifest.layers.entries()) {
      const a = tableFromIPC(readFileSync(join(inGraph.folder, layer.file)));
      const b = tableFromIPC(readFileSync(join(inScript.folder, layer.file)));
      const bitsA = a.batches.flatMap((batch) => Array.from(batch.getChild('activation')!.data[0]!.children[0]!.values as Uint16Array));
      const bitsB = b.batches.flatMap((batch) => Array.from(batch.getChild('activation')!.data[0]!.children[0]!.values as Uint16Array));
      expect(bitsA, layer.name).toEqual(bitsB);
      const infinite = bitsA.filter((bits) => (bits & 0x7c00) === 0x7c00).length;
      overflowed += infinite;
      expect(layer.nonFinite, layer.name).toBe(infinite);
      expect(inScript.manifest.layers[i]!.nonFinite, layer.name).toBe(infinite);
      // channel means: the runtime's float32 ReduceMean of the float32 values against float64 means of
      // the same values (the float32 record): equal up to float32 summation error, n·2^-24 of the mean magnitude
      // (Higham, Accuracy and Stability of Numerical Algorithms, §4.2), plus the final rounding
      const c = tableFromIPC(readFileSync(join(full.folder, layer.file)));
      const values = c.batches.flatMap((batch) => Array.from(batch.getChild('activation')!.data[0]!.children[0]!.values as Float32Array));
      const channels = layer.shape[0]!;
      const per = layer.shape.reduce((x, y) => x * y, 1);
      const positions = per / channels;
      const means = a.batches.flatMap((batch) => Array.from(batch.getChild('channel_mean')!.data[0]!.children[0]!.values as Float32Array));
      for (let r = 0; r < 6; r++) {
        for (let ch = 0; ch < channels; ch++) {
          let sum = 0;
          let magnitude = 0;
          for (let k = 0; k < positions; k++) {
            const v = values[r * per + ch * positions + k]!;
            sum += v;
            magnitude += Math.abs(v);
          }
          const exact = sum / positions;
          const got = means[r * channels + ch]!;
          if (!Number.isFinite(exact)) expect(Number.isFinite(got)).toBe(false);
          else expect(Math.abs(got - exact), layer.name).toBeLessThanOrEqual((magnitude / positions) * positions * 2 ** -24 + Math.abs(exact) * 2 ** -23);
        }
      }
    }
    expect(overflowed).toBeGreaterThan(0);
  });

  it('recordSnapshot with checkpoints beside the writes (fsync on the writer thread while recording goes on) stops at any batch and resumes byte-identical to an uninterrupted recording', async () => {
    const own = join(folder, 'beside-stimuli');
    mkdirSync(own, { recursive: true });
    const twenty = writeStimuliNpy(own, [20, 3, 16, 16], 31);
    const args = { model: modelPath, stimuli: twenty.npy, batch: 2, layers: 'all' };
    const whole = await recordSnapshot({ ...args, out: join(folder, 'beside-whole') });
    for (const stopAt of [4, 10, 16]) {
      const out = join(folder, `beside-${stopAt}`);
      // a tiny interval: a checkpoint falls due at every batch, at most one on its way at a time
      await expect(recordSnapshot({ ...args, out, checkpointSeconds: 1e-6, onProgress: (p) => { if (p.done >= stopAt) throw new Error('stopped'); } })).rejects.toThrow('stopped');
      const progress = JSON.parse(readFileSync(join(out, 'progress.json'), 'utf8')) as { stimuli: number; files: Record<string, number> };
      expect(progress.stimuli).toBeGreaterThan(0);
      expect(progress.stimuli).toBeLessThanOrEqual(stopAt);
      for (const [file, length] of Object.entries(progress.files)) expect(readFileSync(join(out, `${file}.partial`)).length).toBeGreaterThanOrEqual(length);
      const resumed = await recordSnapshot({ ...args, out, resume: true, checkpointSeconds: 1e-6 });
      expect(resumed.resumed).toBe(progress.stimuli);
      for (const layer of whole.manifest.layers) expect(readFileSync(join(out, layer.file)).equals(readFileSync(join(whole.folder, layer.file))), layer.file).toBe(true);
    }
  });

  it('recordSnapshot with a selection that holds convolution outputs before their Relu says in one notice that they cost the runtime its fusions', async () => {
    const notices: string[] = [];
    await recordSnapshot({ model: modelPath, stimuli: stimuli.npy, out: join(folder, 'snap-conv'), layers: 'op:Conv', onNotice: (line) => notices.push(line) });
    expect(notices.filter((line) => /^--layers op:Conv: 3 of the 3 recorded tensors .*conv0, conv1, conv2.*costs those fusions/.test(line))).toHaveLength(1);
    const quiet: string[] = [];
    await recordSnapshot({ model: modelPath, stimuli: stimuli.npy, out: join(folder, 'snap-relu'), layers: 'op:Relu', onNotice: (line) => quiet.push(line) });
    expect(quiet.filter((line) => line.includes('fusions'))).toHaveLength(0);
  });
});
