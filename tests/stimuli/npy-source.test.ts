/**
 * `.npy` stimulus arrays are checked from their header against the model before any data is read, and
 * read batch by batch afterwards, so an array larger than one Node buffer (2 GiB) is read, not refused.
 * The big files are sparse (a header, a hole, a few written values), so the tests use no real disk.
 * Header layout: the NumPy format specification (numpy.lib.format, version 1.0).
 */
import { closeSync, openSync, writeSync, ftruncateSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { openStimulusSource } from '../../src/stimuli/source.js';
import { formatNpyHeader } from '../../src/stimuli/npy.js';
import { tempFolder } from '../helpers/onnx-builder.js';

let dir: string;
const prep = (size: [number, number]) => ({ preprocessing: { size, mean: [0, 0, 0], std: [1, 1, 1], bgr: false }, channels: 3, labelsFile: 'none' });

/** A sparse .npy: header for `shape` (float32), the data region a hole of the right size, `values` written at element offsets. */
function sparseNpy(name: string, shape: number[], values: Array<[number, number]> = []): string {
  const path = join(dir, name);
  const header = formatNpyHeader('<f4', shape);
  const fd = openSync(path, 'w');
  try {
    writeSync(fd, header, 0, header.length, 0);
    const elements = shape.reduce((a, b) => a * b, 1);
    ftruncateSync(fd, header.length + elements * 4);
    for (const [at, value] of values) writeSync(fd, new Uint8Array(new Float32Array([value]).buffer), 0, 4, header.length + at * 4);
  } finally {
    closeSync(fd);
  }
  return path;
}

beforeAll(() => {
  dir = tempFolder('sonde-npy-');
});

describe('openStimulusSource(.npy)', () => {
  it('openStimulusSource refuses a 1.9 GB array whose header does not fit the model, from the header alone', () => {
    // [2500, 3, 224, 224] float32 = 1.88 GB of (sparse) data, for a 16×16 model input
    const path = sparseNpy('wrong.npy', [2500, 3, 224, 224]);
    expect(() => openStimulusSource(path, prep([16, 16]))).toThrow(/holds 224x224 arrays but the model input is 16x16/);
    const channels = sparseNpy('wrong-c.npy', [10, 4, 16, 16]);
    expect(() => openStimulusSource(channels, prep([16, 16]))).toThrow(/has 4 channels but the model input has 3/);
  });

  it('openStimulusSource refuses data shorter or longer than the header says, before reading it', () => {
    const path = sparseNpy('short.npy', [4, 3, 16, 16]);
    const fd = openSync(path, 'r+');
    ftruncateSync(fd, 200);
    closeSync(fd);
    expect(() => openStimulusSource(path, prep([16, 16]))).toThrow(/data is truncated/);
    const long = sparseNpy('long.npy', [4, 3, 16, 16]);
    const bytes = Buffer.alloc(8);
    const fd2 = openSync(long, 'a');
    writeSync(fd2, bytes);
    closeSync(fd2);
    expect(() => openStimulusSource(long, prep([16, 16]))).toThrow(/8 bytes follow the data/);
  });

  it('openStimulusSource reads a valid array over 2 GiB batch by batch (values at its start and end read back exactly)', async () => {
    // 11 000 × 3 × 128 × 128 float32 = 2.16 GB > 2 GiB, the most one Node buffer holds
    const per = 3 * 128 * 128;
    const n = 11_000;
    const last = (n - 1) * per;
    const path = sparseNpy('big.npy', [n, 3, 128, 128], [[0, 1.5], [per + 7, -2.25], [last + per - 1, 3.75]]);
    const source = openStimulusSource(path, prep([128, 128]));
    expect(source.count).toBe(n);
    const out = new Float32Array(2 * per);
    await source.read(0, 2, out);
    expect(out[0]).toBe(1.5);
    expect(out[per + 7]).toBe(-2.25);
    await source.read(n - 1, 1, out);
    expect(out[per - 1]).toBe(3.75);
    expect(out[0]).toBe(0);
  });

  it('openStimulusSource reads a small array the same way (every value, in order)', async () => {
    const values = new Float32Array(2 * 3 * 4 * 4).map((_, i) => i / 8);
    const header = formatNpyHeader('<f4', [2, 3, 4, 4]);
    const path = join(dir, 'small.npy');
    writeFileSync(path, Buffer.concat([Buffer.from(header), Buffer.from(values.buffer)]));
    const source = openStimulusSource(path, prep([4, 4]));
    const out = new Float32Array(values.length);
    await source.read(0, 2, out);
    expect(Array.from(out)).toEqual(Array.from(values));
    await source.read(1, 1, out);
    expect(Array.from(out.subarray(0, 48))).toEqual(Array.from(values.subarray(48)));
  });
});
