import { createHash } from 'node:crypto';
import { closeSync, mkdtempSync, openSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { BackgroundWriteError, BackgroundWriter } from '../../src/snapshot/background-writer.js';
import { writeFailure } from '../../src/disk/write-failure.js';
import { HashingFileSink } from '../../src/snapshot/arrow-sink.js';
import { LayerFileWriter } from '../../src/snapshot/layer-file.js';
import { float32ToFloat16 } from '../../src/snapshot/float16.js';
import { createRandom } from '../../src/random.js';

const dir = mkdtempSync(join(tmpdir(), 'sonde-bg-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

function chunks(seed: number): Uint8Array[] {
  const rng = createRandom(seed);
  return [8, 3, 1 << 20, 17, 4096, 5].map((n) => new Uint8Array(n).map(() => Math.floor(rng.uniform() * 256)));
}

describe('BackgroundWriter', () => {
  it('HashingFileSink with a background writer writes the same bytes and SHA-256 (node:crypto over the bytes) as on the calling thread, with donated chunks moved, not copied', async () => {
    const background = new BackgroundWriter(64 * 1024); // a small queue: write() must block and drain on the way
    try {
      const direct = new HashingFileSink(join(dir, 'direct.bin'));
      const threaded = new HashingFileSink(join(dir, 'threaded.bin'), { background });
      const expected = createHash('sha256');
      for (const chunk of chunks(1)) {
        direct.write(chunk);
        expected.update(chunk);
        threaded.donate(chunk.buffer);
        threaded.write(chunk);
        threaded.undonate();
        expect(chunk.buffer.byteLength).toBe(0); // moved to the writer thread (detached here)
      }
      expect(threaded.prefixSha256()).toBe(direct.prefixSha256());
      const a = direct.commit();
      const b = threaded.commit();
      expect(b).toEqual(a);
      expect(b.sha256).toBe(expected.digest('hex'));
      expect(readFileSync(join(dir, 'threaded.bin')).equals(readFileSync(join(dir, 'direct.bin')))).toBe(true);
    } finally {
      await background.terminate();
    }
  });

  it('LayerFileWriter with a background writer produces a file byte-identical to the single-threaded one', async () => {
    const background = new BackgroundWriter();
    try {
      const layout = { name: 'conv', shape: [4, 8, 8], dtype: 'float32' as const, keep: 'full' as const };
      const plain = new LayerFileWriter(join(dir, 'plain.arrow'), layout);
      const threaded = new LayerFileWriter(join(dir, 'threaded.arrow'), layout, { background });
      const rng = createRandom(5);
      for (let b = 0; b < 3; b++) {
        const data = new Float32Array(2 * 256).map(() => rng.uniform() - 0.5);
        plain.write(b * 2, 2, data.slice());
        threaded.write(b * 2, 2, data, true);
        threaded.checkpoint();
      }
      const p = plain.finish();
      const t = threaded.finish();
      expect(t.sha256).toBe(p.sha256);
      expect(readFileSync(join(dir, 'threaded.arrow')).equals(readFileSync(join(dir, 'plain.arrow')))).toBe(true);
    } finally {
      await background.terminate();
    }
  });

  it.each(['zstd', 'lz4'] as const)('LayerFileWriter.precompress (%s on the thread pool, then write) produces a file byte-identical to write alone, for float32 values and float16 bits (exact property)', async (compression) => {
    const background = new BackgroundWriter();
    try {
      for (const dtype of ['float32', 'float16'] as const) {
        // 16 × 32 × 32 values a row: 64 KiB a row as float32, so two rows pass the size from which values are compressed beforehand
        const layout = { name: 'conv', shape: [16, 32, 32], dtype, keep: 'full' as const, compression };
        const plain = new LayerFileWriter(join(dir, `plain-${compression}-${dtype}.arrow`), layout);
        const ahead = new LayerFileWriter(join(dir, `ahead-${compression}-${dtype}.arrow`), layout, { background });
        const rng = createRandom(9);
        for (let b = 0; b < 3; b++) {
          const values = new Float32Array(2 * 16 * 32 * 32).map(() => Math.max(0, rng.uniform() - 0.5));
          // float16 layers get the runtime's float16 bits (as a Cast in the graph hands them over)
          const data = dtype === 'float16' ? float32ToFloat16(values) : values;
          const means = dtype === 'float16' ? new Float32Array(2 * 16).fill(0.25) : undefined;
          plain.write(b * 2, 2, data.slice(), false, means);
          await ahead.precompress(data, 2);
          ahead.write(b * 2, 2, data, true, means);
        }
        // every batch's values went in from the frame made beforehand
        expect(ahead.batchesCompressedAhead, dtype).toBe(3);
        expect(plain.batchesCompressedAhead, dtype).toBe(0);
        const p = plain.finish();
        const a = ahead.finish();
        expect(a.sha256, dtype).toBe(p.sha256);
        expect(readFileSync(join(dir, `ahead-${compression}-${dtype}.arrow`)).equals(readFileSync(join(dir, `plain-${compression}-${dtype}.arrow`))), dtype).toBe(true);
      }
    } finally {
      await background.terminate();
    }
  });

  it('BackgroundWriter.syncAll hands on the chunks every sink holds back, writes them and fsyncs every file (the files then hold every byte written)', async () => {
    const background = new BackgroundWriter();
    try {
      const sinks = [0, 1, 2].map((k) => new HashingFileSink(join(dir, `all-${k}.bin`), { background }));
      const written = sinks.map(() => [] as number[]);
      sinks.forEach((sink, k) => {
        for (const chunk of chunks(10 + k)) {
          if (chunk.byteLength > 4096) continue; // small chunks only: all of them wait in the sink's stage
          sink.write(chunk);
          written[k]!.push(...chunk);
        }
      });
      background.syncAll();
      sinks.forEach((_, k) => expect(Array.from(readFileSync(join(dir, `all-${k}.bin.partial`)))).toEqual(written[k]));
      for (const sink of sinks) sink.commit();
    } finally {
      await background.terminate();
    }
  });

  it('BackgroundWriter reports a failed write (EBADF: a read-only descriptor) with its code and file, and writeFailure words it in one line', async () => {
    const background = new BackgroundWriter();
    const path = join(dir, 'read-only.bin');
    writeFileSync(path, 'x');
    const fd = openSync(path, 'r');
    try {
      const stream = background.open(fd, path);
      background.write(stream, new Uint8Array(10), 0, false);
      let caught: unknown;
      try {
        background.sync(stream);
      } catch (error) {
        caught = error;
      }
      expect(caught).toBeInstanceOf(BackgroundWriteError);
      expect((caught as BackgroundWriteError).code).toBe('EBADF');
      expect((caught as BackgroundWriteError).path).toBe(path);
      expect(writeFailure(path, caught).message).toMatch(/^cannot write .*read-only\.bin: EBADF/);
      // later calls keep failing rather than writing on
      expect(() => background.write(stream, new Uint8Array(1), 10, false)).toThrow(BackgroundWriteError);
      background.close(stream);
    } finally {
      closeSync(fd);
      await background.terminate();
    }
  });
});
