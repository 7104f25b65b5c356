/**
 * Compressed layer files (src/snapshot/compression.ts) against outside references:
 * - the body layout of a compressed record batch follows the Arrow columnar format specification
 *   ("Compression" under "IPC Format"; Message.fbs BodyCompression): each non-empty buffer is its
 *   uncompressed length as a little-endian int64 and then one codec frame, −1 when stored as is, empty
 *   buffers empty, regions 8-byte aligned;
 * - every frame decompresses with independent codec implementations: Debian's python3-lz4 (LZ4 frame
 *   format, liblz4) and python3-zstandard (libzstd) — and frames they write decode with Sonde's reader;
 * - recorded files read by nodejs-polars (the Rust Arrow IPC reader, an independent implementation)
 *   hold the same values as an uncompressed recording, and Sonde's reader hands out the same bits.
 * Python checks are skipped, saying why, where /usr/bin/python3 lacks the codec modules (`.ci/run`
 * installs python3-lz4 and python3-zstandard).
 */
import { spawnSync } from 'node:child_process';
import { readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import pl from 'nodejs-polars';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { sweepModulations } from '../../src/replay/sweep.js';
import { LayerBlockFile } from '../../src/snapshot/block-reader.js';
import { compressBodyBuffers, compressSync, decodeBuffer, decodeBufferSync, FRAME_BOUND_FACTOR, frameOutputBound, parseCompression, type LayerCompression } from '../../src/snapshot/compression.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

const PYTHON = '/usr/bin/python3';
const hasCodecs = spawnSync(PYTHON, ['-c', 'import lz4.frame, zstandard'], { encoding: 'utf8' }).status === 0;
if (!hasCodecs) console.warn(`compression tests against python3-lz4/python3-zstandard skipped: ${PYTHON} lacks them (apt-get install python3-lz4 python3-zstandard)`);

/** Runs Python on stdin bytes; `mode` c/d, codec lz4/zstd. Returns stdout bytes. */
function python(mode: 'compress' | 'decompress', codec: 'lz4' | 'zstd', input: Uint8Array): Buffer {
  const code = [
    'import sys, lz4.frame, zstandard',
    'data = sys.stdin.buffer.read()',
    `mode, codec = ${JSON.stringify(mode)}, ${JSON.stringify(codec)}`,
    'if codec == "lz4": out = lz4.frame.compress(data) if mode == "compress" else lz4.frame.decompress(data)',
    // a frame need not carry its content size (Sonde's writer leaves it out; the Arrow prefix has it)
    'else: out = zstandard.ZstdCompressor(level=3).compress(data) if mode == "compress" else zstandard.ZstdDecompressor().decompress(data, max_output_size=1 << 28)',
    'sys.stdout.buffer.write(out)',
  ].join('\n');
  const result = spawnSync(PYTHON, ['-c', code], { input, maxBuffer: 1 << 28 });
  expect(result.status, String(result.stderr)).toBe(0);
  return result.stdout;
}

/** ReLU-like float32 values: about half exact zeros, the rest positive with full mantissas. */
function reluValues(count: number, seed: number): Float32Array {
  const rng = createRandom(seed);
  return new Float32Array(count).map(() => Math.max(0, rng.normal()));
}

const bytesOf = (a: ArrayBufferView) => new Uint8Array(a.buffer, a.byteOffset, a.byteLength);

describe('compressBodyBuffers', () => {
  for (const codec of ['lz4', 'zstd'] as const) {
    it(`compressBodyBuffers(${codec}) lays out prefix + frame per buffer, −1 for bytes kept as they are, empty buffers empty, regions aligned to 8 (Arrow IPC compression)`, () => {
      const relu = reluValues(5000, 1);
      const index = Int32Array.from({ length: 37 }, (_, i) => i + 100);
      const rng = createRandom(9);
      const noise = new Uint8Array(3001).map(() => Math.floor(rng.uniform() * 256));
      const buffers = [new Uint8Array(0), index, new Uint8Array(0), relu, noise];
      const body = compressBodyBuffers(codec, buffers);
      expect(body.bufferRegions).toHaveLength(buffers.length);
      expect(body.buffers).toHaveLength(2 * buffers.length); // [prefix, data] pairs, as apache-arrow's writer writes them
      let end = 0;
      body.bufferRegions.forEach((region, i) => {
        const prefix = body.buffers[2 * i]!;
        const data = body.buffers[2 * i + 1]!;
        if (buffers[i]!.byteLength === 0) {
          expect(region.length).toBe(0);
          expect(prefix.byteLength + data.byteLength).toBe(0);
          return;
        }
        expect(region.offset % 8).toBe(0);
        expect(region.offset).toBeGreaterThanOrEqual(end);
        expect(region.length).toBe(8 + data.byteLength);
        end = region.offset + region.length;
        const length = new DataView(prefix.buffer, prefix.byteOffset, 8).getBigInt64(0, true);
        if (length === -1n) {
          // stored as it is: the bytes themselves
          expect(Buffer.compare(bytesOf(data), bytesOf(buffers[i]!))).toBe(0);
        } else {
          expect(length).toBe(BigInt(buffers[i]!.byteLength)); // the UNcompressed length
          expect(data.byteLength).toBeLessThan(buffers[i]!.byteLength);
        }
        // ReLU values compress; uniformly random bytes do not and are stored behind −1
        if (i === 3) expect(length).toBe(BigInt(relu.byteLength));
        if (i === 4) expect(length).toBe(-1n);
        // the region, prefix included, decodes to the original bytes
        const region8 = new Uint8Array(8 + data.byteLength);
        region8.set(bytesOf(prefix), 0);
        region8.set(bytesOf(data), 8);
        expect(Buffer.compare(decodeBufferSync(codec, region8), bytesOf(buffers[i]!))).toBe(0);
      });
      expect(body.byteLength % 8).toBe(0);
      expect(body.byteLength).toBeGreaterThanOrEqual(end);
    });

    it.skipIf(!hasCodecs)(`compressBodyBuffers(${codec}) frames decompress with ${codec === 'lz4' ? 'python3-lz4' : 'python3-zstandard'}, and its frames decode with decodeBuffer`, async () => {
      const relu = reluValues(20000, 2);
      const body = compressBodyBuffers(codec, [relu]);
      const frame = bytesOf(body.buffers[1]!);
      expect(Buffer.compare(python('decompress', codec, frame), bytesOf(relu))).toBe(0);
      const theirs = python('compress', codec, bytesOf(relu));
      const region = new Uint8Array(8 + theirs.byteLength);
      new DataView(region.buffer).setBigInt64(0, BigInt(relu.byteLength), true);
      region.set(theirs, 8);
      expect(Buffer.compare(await decodeBuffer(codec, region), bytesOf(relu))).toBe(0);
      expect(Buffer.compare(decodeBufferSync(codec, region), bytesOf(relu))).toBe(0);
    });
  }

  it('decodeBuffer refuses a frame whose length differs from its prefix, and a region too short for a prefix', async () => {
    const relu = reluValues(1000, 3);
    const body = compressBodyBuffers('zstd', [relu]);
    const region = new Uint8Array(8 + body.buffers[1]!.byteLength);
    region.set(bytesOf(body.buffers[1]!), 8);
    new DataView(region.buffer).setBigInt64(0, 3999n, true);
    await expect(decodeBuffer('zstd', region)).rejects.toThrow(/decompressed to 4000 bytes, its prefix says 3999/);
    expect(() => decodeBufferSync('zstd', new Uint8Array(5))).toThrow(/no room for its length prefix/);
  });
});

describe('frameOutputBound', () => {
  for (const codec of ['lz4', 'zstd'] as const) {
    it.skipIf(!hasCodecs)(`frameOutputBound(${codec}) bounds what frames of Sonde's encoder and of ${codec === 'lz4' ? 'python3-lz4' : 'python3-zstandard'} decompress to, from their block headers, within the factor decodeBuffer allows`, () => {
      const block = codec === 'zstd' ? 128 * 1024 : 4 << 20;
      for (const data of [bytesOf(reluValues(3_000_000, 6)), new Uint8Array(3 << 20), new Uint8Array(7)]) {
        for (const frame of [compressSync(codec, data), python('compress', codec, data)]) {
          const bound = frameOutputBound(codec, frame);
          expect(bound).toBeGreaterThanOrEqual(data.byteLength);
          expect(bound).toBeLessThanOrEqual(FRAME_BOUND_FACTOR * data.byteLength + block);
        }
        // and they decode within their own size as the limit
        const frame = compressSync(codec, data);
        const region = new Uint8Array(8 + frame.byteLength);
        new DataView(region.buffer).setBigInt64(0, BigInt(data.byteLength), true);
        region.set(frame, 8);
        expect(decodeBufferSync(codec, region, data.byteLength).byteLength).toBe(data.byteLength);
      }
    });
  }

  it('frameOutputBound refuses bytes that are not a whole frame, and decodeBuffer refuses a small frame that would expand far past its stated length or past its batch, before decompressing', async () => {
    const zeros = new Uint8Array(64 << 20); // 64 MiB of zeros: a frame of a few kB
    for (const codec of ['lz4', 'zstd'] as const) {
      const frame = compressSync(codec, zeros);
      expect(frame.byteLength).toBeLessThan(1 << 20);
      expect(() => frameOutputBound(codec, frame.subarray(0, frame.byteLength - 3))).toThrow(/cut short/);
      expect(() => frameOutputBound(codec, new Uint8Array(16))).toThrow(/not a(n LZ4| Zstandard) frame/);
      const region = (length: number) => {
        const out = new Uint8Array(8 + frame.byteLength);
        new DataView(out.buffer).setBigInt64(0, BigInt(length), true);
        out.set(frame, 8);
        return out;
      };
      // a prefix that lies about a small length in a batch of 4096 bytes: the blocks allow 64 MiB
      expect(() => decodeBufferSync(codec, region(1000), 4096)).toThrow(/can expand to \d+ bytes, far more than the 4096 its batch can hold \(refused unread\)/);
      await expect(decodeBuffer(codec, region(1000), 4096)).rejects.toThrow(/far more than the 4096/);
      // an honest prefix, but more than the batch holds
      expect(() => decodeBufferSync(codec, region(zeros.byteLength), 4096)).toThrow(/says it holds 67108864 bytes, more than the 4096 its batch can hold/);
      expect(decodeBufferSync(codec, region(zeros.byteLength)).byteLength).toBe(zeros.byteLength);
    }
  });
});

describe('parseCompression', () => {
  it('parseCompression accepts none, lz4 and zstd and names the choices otherwise', () => {
    expect(['none', 'lz4', 'zstd'].map((v) => parseCompression(v))).toEqual(['none', 'lz4', 'zstd']);
    expect(() => parseCompression('gzip')).toThrow(/--compress must be one of none, lz4, zstd, got "gzip"/);
  });
});

describe('recordSnapshot with compression', () => {
  let dir: string;
  const codecs: LayerCompression[] = ['none', 'lz4', 'zstd'];
  beforeAll(async () => {
    dir = tempFolder('sonde-compress-');
    const model = join(dir, 'net.onnx');
    writeFileSync(model, buildTinyNet({ bias: true, seed: 4, widths: [8, 8, 8] }));
    const stim = writeStimuliNpy(dir, [12, 3, 16, 16], 5);
    for (const compress of codecs) {
      await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, compress), layers: 'all', batch: 5, threads: 1, compress });
      await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, `${compress}-f16`), layers: 'op:Relu', batch: 5, threads: 1, compress, dtype: 'float16' });
    }
  }, 60_000);

  it('recordSnapshot(compress) stores every batch with the codec the manifest names, and the reader hands out the same bits as an uncompressed recording', async () => {
    for (const suffix of ['', '-f16']) {
      const plain = openSnapshot(join(dir, `none${suffix}`));
      for (const codec of ['lz4', 'zstd'] as const) {
        const snap = openSnapshot(join(dir, `${codec}${suffix}`));
        for (const entry of snap.manifest.layers) {
          expect(entry.compression).toBe(codec);
          const file = LayerBlockFile.open(join(snap.folder, entry.file))!;
          for (let b = 0; b < file.count; b++) expect(file.compressionOf(b)).toBe(codec);
          file.close();
          const read = async (s: typeof snap) => {
            const parts: Buffer[] = [];
            for await (const batch of s.readLayer(entry.name, { raw: true })) {
              parts.push(Buffer.from(bytesOf(batch.activationFloat16 ?? batch.activation!)), Buffer.from(bytesOf(batch.channelMeans)), Buffer.from(bytesOf(batch.index)));
            }
            return Buffer.concat(parts);
          };
          expect(Buffer.compare(await read(snap), await read(plain)), `${codec}${suffix} ${entry.name}`).toBe(0);
        }
      }
      expect(plain.manifest.layers.every((l) => l.compression === undefined)).toBe(true);
    }
  });

  it('recordSnapshot(compress) files are read by nodejs-polars with the values of the uncompressed files', () => {
    for (const codec of ['lz4', 'zstd'] as const) {
      const snap = openSnapshot(join(dir, codec));
      for (const entry of snap.manifest.layers) {
        const theirs = pl.readIPC(readFileSync(join(snap.folder, entry.file)));
        const plain = pl.readIPC(readFileSync(join(dir, 'none', entry.file)));
        expect(theirs.columns).toEqual(['index', 'channel_mean', 'activation']);
        expect(theirs.height).toBe(12);
        expect(theirs.frameEqual(plain), `${codec} ${entry.name}`).toBe(true);
      }
    }
  });

  it('recordSnapshot(compress) makes ReLU layer files smaller than uncompressed ones with both codecs (common practice: a large share of a ReLU map is exact zeros; sizes on real networks are in the benchmark)', () => {
    const snap = openSnapshot(join(dir, 'none'));
    for (const entry of snap.manifest.layers.filter((l) => l.op === 'Relu')) {
      const plain = statSync(join(dir, 'none', entry.file)).size;
      for (const codec of ['lz4', 'zstd']) expect(statSync(join(dir, codec, entry.file)).size, `${codec} ${entry.name}`).toBeLessThan(plain);
    }
  });

  it('recordSnapshot(compress) interrupted after 8 stimuli and resumed writes layer and means files byte-identical to an uninterrupted run; resuming with another codec is refused', async () => {
    const args = { model: join(dir, 'net.onnx'), stimuli: join(dir, 'stimuli.npy'), labels: join(dir, 'labels.csv'), layers: 'all', batch: 4, threads: 1, checkpointSeconds: 0, compress: 'zstd' as const };
    const whole = await recordSnapshot({ ...args, out: join(dir, 'resume-whole') });
    const out = join(dir, 'resume-cut');
    await expect(recordSnapshot({ ...args, out, onProgress: (p) => {
      if (p.done >= 8) throw new Error('stopped by the test after 8 stimuli');
    } })).rejects.toThrow(/stopped by the test/);
    await expect(recordSnapshot({ ...args, out, resume: true, compress: 'lz4' })).rejects.toThrow(/--resume: .* was recorded with other layers \(or --keep\/--dtype\/--compress\)/);
    const resumed = await recordSnapshot({ ...args, out, resume: true });
    expect(resumed.resumed).toBe(8);
    for (const entry of whole.manifest.layers) {
      expect(readFileSync(join(out, entry.file)).equals(readFileSync(join(whole.folder, entry.file))), entry.file).toBe(true);
      expect(readFileSync(join(out, entry.means!.file)).equals(readFileSync(join(whole.folder, entry.means!.file))), entry.means!.file).toBe(true);
    }
  });

  it('recordModulated from a ZSTD baseline (tail replay fed from compressed boundary tensors) writes the values of the same run from the uncompressed baseline, in ZSTD files', async () => {
    writeFileSync(join(dir, 'gain.json'), JSON.stringify({ site: 'relu1', kind: 'uniform', gain: 1.3 }));
    const args = { model: join(dir, 'net.onnx'), stimuli: join(dir, 'stimuli.npy'), labels: join(dir, 'labels.csv'), batch: 5, threads: 1, modulate: join(dir, 'gain.json') };
    const fromZstd = await recordModulated({ ...args, out: join(dir, 'mod-zstd'), from: join(dir, 'zstd') });
    const fromPlain = await recordModulated({ ...args, out: join(dir, 'mod-none'), from: join(dir, 'none') });
    expect(fromZstd.manifest.run.mode).toBe('tail');
    const a = openSnapshot(fromZstd.folder);
    const b = openSnapshot(fromPlain.folder);
    for (const entry of a.manifest.layers) {
      expect(entry.compression).toBe('zstd');
      const bytes = async (s: typeof a) => {
        const parts: Buffer[] = [];
        for await (const batch of s.readLayer(entry.name)) parts.push(Buffer.from(bytesOf(batch.activation!)));
        return Buffer.concat(parts);
      };
      expect(Buffer.compare(await bytes(a), await bytes(b)), entry.name).toBe(0);
    }
  });

  it('diffSnapshots and tuneSnapshot on ZSTD snapshots give the numbers they give on the uncompressed recordings', async () => {
    const zstd = await diffSnapshots({ base: join(dir, 'zstd'), mod: join(dir, 'mod-zstd'), bootstrap: 0 });
    const plain = await diffSnapshots({ base: join(dir, 'none'), mod: join(dir, 'mod-none'), bootstrap: 0 });
    expect(JSON.stringify(zstd.layers)).toBe(JSON.stringify(plain.layers));
    const tunedZstd = await tuneSnapshot({ snapshot: join(dir, 'zstd') });
    const tunedPlain = await tuneSnapshot({ snapshot: join(dir, 'none') });
    expect(JSON.stringify(tunedZstd.blocks)).toBe(JSON.stringify(tunedPlain.blocks));
  });
});

describe('sweepModulations from a compressed baseline', () => {
  it('sweepModulations from a ZSTD baseline gives the cells it gives from the uncompressed baseline', async () => {
    const dir = tempFolder('sonde-compress-sweep-');
    const model = join(dir, 'net.onnx');
    const kinds = ['alpha', 'beta', 'gamma'];
    writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 3 }));
    writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
    const stim = writeStimuliNpy(dir, [18, 3, 16, 16], 43, Array.from({ length: 18 }, (_, i) => kinds[i % 3]!));
    const cells: string[] = [];
    for (const compress of ['none', 'zstd'] as const) {
      await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, compress), batch: 4, threads: 1, compress });
      const result = await sweepModulations({ model, from: join(dir, compress), sites: ['relu1'], schemes: ['uniform'], strengths: [0, 0.5], task: 'detect:all', out: join(dir, `sweep-${compress}`), threads: 1 });
      cells.push(JSON.stringify(result.cells.map((c) => [c.site, c.scheme, c.strength, c.category, c.base, c.mod, c.change])));
    }
    expect(cells[1]).toBe(cells[0]);
    expect(JSON.parse(cells[0]!).length).toBe(6);
  }, 60_000);
});

describe('sonde record --compress', () => {
  it('sonde record compresses with ZSTD by default, --compress none keeps plain files, and a modulated run (tail or full) keeps its baseline\'s codec', async () => {
    const dir = tempFolder('sonde-compress-cli-');
    const model = join(dir, 'net.onnx');
    writeFileSync(model, buildTinyNet({ bias: true, seed: 44 }));
    const stim = writeStimuliNpy(dir, [6, 3, 16, 16], 45);
    writeFileSync(join(dir, 'gain.yaml'), 'site: relu1\nkind: uniform\ngain: 1.5\n');
    const codecs = (folder: string) => [...new Set(openSnapshot(folder).manifest.layers.map((l) => l.compression ?? 'none'))];
    const record = async (out: string, extra: string[]) => {
      const result = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', join(dir, out), '--threads', '1', ...extra]);
      expect(result.code, result.stderr).toBe(0);
      return join(dir, out);
    };
    expect(codecs(await record('default', []))).toEqual(['zstd']);
    expect(codecs(await record('plain', ['--compress', 'none']))).toEqual(['none']);
    expect(codecs(await record('mod-tail', ['--modulate', join(dir, 'gain.yaml'), '--from', join(dir, 'plain')]))).toEqual(['none']);
    expect(codecs(await record('mod-full', ['--modulate', join(dir, 'gain.yaml'), '--from', join(dir, 'plain'), '--full-run']))).toEqual(['none']);
    expect(codecs(await record('mod-full-z', ['--modulate', join(dir, 'gain.yaml'), '--from', join(dir, 'default'), '--full-run']))).toEqual(['zstd']);
    expect(codecs(await record('mod-lz4', ['--modulate', join(dir, 'gain.yaml'), '--from', join(dir, 'default'), '--compress', 'lz4']))).toEqual(['zstd', 'lz4']); // upstream layers stay the baseline's files
  }, 60_000);
});
