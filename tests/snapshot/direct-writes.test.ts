import { createHash } from 'node:crypto';
import { closeSync, existsSync, mkdtempSync, openSync, readFileSync, rmSync, statfsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { BackgroundWriter } from '../../src/snapshot/background-writer.js';
import { HashingFileSink } from '../../src/snapshot/arrow-sink.js';
import { parseDiskWriteMode, wantsDirectWrites } from '../../src/disk/write-mode.js';
import { createRandom } from '../../src/random.js';

// Direct (O_DIRECT) writes go through a 16 MiB aligned stage and a part-block tail per file; every check
// here is an exact property: the file holds exactly the bytes written, and its SHA-256 is node:crypto's
// over them, whichever way the bytes reached the disk.

const dir = mkdtempSync(join(tmpdir(), 'sonde-direct-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const MiB = 2 ** 20;

function bytes(seed: number, length: number): Uint8Array {
  const rng = createRandom(seed);
  const out = new Uint8Array(length);
  for (let i = 0; i < length; i += 997) out[i] = Math.floor(rng.uniform() * 256);
  for (let i = 1; i < length; i++) out[i] = (out[i]! ^ (out[i - 1]! * 31 + i)) & 255;
  return out;
}

/** Chunk sizes that cross block and stage boundaries: tiny, odd, a block, just under and over the 16 MiB stage. */
const SIZES = [5, 4091, 4096, 1, 16 * MiB - 3, 7, 20 * MiB + 11, 300, 4096 * 3, 2];

function concat(parts: Uint8Array[]): Uint8Array {
  const out = new Uint8Array(parts.reduce((n, p) => n + p.length, 0));
  let at = 0;
  for (const p of parts) out.set(p, at), (at += p.length);
  return out;
}

describe('direct disk writes', () => {
  it.each(['direct', 'cached', 'auto'] as const)('%s: a file written in chunks across block and stage boundaries, with checkpoints between, holds exactly the bytes written and their SHA-256 (node:crypto)', async (mode) => {
    const background = new BackgroundWriter(8 * MiB, mode);
    try {
      const path = join(dir, `chunks-${mode}.bin`);
      const sink = new HashingFileSink(path, { background });
      const parts: Uint8Array[] = [];
      SIZES.forEach((size, i) => {
        const part = bytes(i + 1, size);
        parts.push(part.slice());
        sink.write(part);
        if (i % 3 === 2) {
          // a checkpoint: the file on disk holds every byte so far, no padding after them
          sink.sync();
          const all = concat(parts);
          const onDisk = readFileSync(`${path}.partial`);
          expect(onDisk.length).toBe(all.length);
          expect(onDisk.equals(Buffer.from(all))).toBe(true);
        }
      });
      if (mode === 'direct' && statfsSync(dir).type === 0xef53) expect(background.directStreams()).toBe(1); // ext4 takes O_DIRECT
      if (mode === 'cached') expect(background.directStreams()).toBe(0);
      const all = concat(parts);
      const result = sink.commit();
      expect(result.bytes).toBe(all.length);
      expect(result.sha256).toBe(createHash('sha256').update(all).digest('hex'));
      expect(readFileSync(path).equals(Buffer.from(all))).toBe(true);
    } finally {
      await background.terminate();
    }
  });

  it('direct: five files written in turn (more streams than writes in flight), synced one by one and all at once, each hold exactly their bytes', async () => {
    const background = new BackgroundWriter(8 * MiB, 'direct');
    try {
      const sinks = [0, 1, 2, 3, 4].map((k) => new HashingFileSink(join(dir, `turns-${k}.bin`), { background }));
      const parts: Uint8Array[][] = sinks.map(() => []);
      for (let round = 0; round < 6; round++) {
        sinks.forEach((sink, k) => {
          const part = bytes(100 + round * 5 + k, (round % 2 === 0 ? 3 * MiB : 5000) + 17 * k + round);
          parts[k]!.push(part.slice());
          sink.write(part);
        });
        if (round === 2) sinks[1]!.sync(); // one stream's sync while the others' writes are in flight
        if (round === 4) background.syncAll();
      }
      sinks.forEach((sink, k) => {
        const all = concat(parts[k]!);
        const result = sink.commit();
        expect(result.sha256).toBe(createHash('sha256').update(all).digest('hex'));
        expect(readFileSync(join(dir, `turns-${k}.bin`)).equals(Buffer.from(all)), `file ${k}`).toBe(true);
      });
    } finally {
      await background.terminate();
    }
  });

  it('direct: a file resumed at a prefix that ends mid-block continues to the same bytes and SHA-256 as one written in one go', async () => {
    const whole = bytes(42, 3 * MiB + 1234);
    const cut = 2 * MiB + 777; // not a multiple of 4096
    const path = join(dir, 'resumed.bin');
    const first = new BackgroundWriter(8 * MiB, 'direct');
    let sha256At = '';
    try {
      const sink = new HashingFileSink(path, { background: first });
      sink.write(whole.slice(0, cut));
      sink.sync();
      sha256At = sink.prefixSha256();
      sink.write(whole.slice(cut, cut + 5000)); // written after the checkpoint, then the run stops
      sink.suspend();
    } finally {
      await first.terminate();
    }
    const second = new BackgroundWriter(8 * MiB, 'direct');
    try {
      const sink = new HashingFileSink(path, { background: second, resumeAt: cut, resumeSha256: sha256At });
      sink.write(whole.slice(cut));
      const result = sink.commit();
      expect(result.sha256).toBe(createHash('sha256').update(whole).digest('hex'));
      expect(readFileSync(path).equals(Buffer.from(whole))).toBe(true);
    } finally {
      await second.terminate();
    }
  });

  it('direct: a write out of sequence continues through the page cache with pwrite semantics (the gap reads as zeros)', async () => {
    const background = new BackgroundWriter(8 * MiB, 'direct');
    const path = join(dir, 'gap.bin');
    const fd = openSync(path, 'w');
    try {
      const stream = background.open(fd, path);
      const a = bytes(7, 10_000);
      const b = bytes(8, 5000);
      background.write(stream, a, 0, false);
      background.write(stream, b, 20_000, false);
      background.sync(stream);
      const expected = new Uint8Array(25_000);
      expected.set(a, 0);
      expected.set(b, 20_000);
      expect(readFileSync(path).equals(Buffer.from(expected))).toBe(true);
      expect(background.sha256(stream).toString('hex')).toBe(createHash('sha256').update(a).update(b).digest('hex'));
      background.close(stream);
    } finally {
      closeSync(fd);
      await background.terminate();
    }
  });

  it.runIf(existsSync('/dev/shm'))('direct on tmpfs: the bytes arrive whether the file system takes O_DIRECT or the writer falls back to the page cache', async () => {
    const shm = mkdtempSync('/dev/shm/sonde-direct-');
    const background = new BackgroundWriter(8 * MiB, 'direct');
    try {
      const sink = new HashingFileSink(join(shm, 'f.bin'), { background });
      const data = bytes(3, 5 * MiB + 3);
      sink.write(data.slice());
      const result = sink.commit();
      expect(result.sha256).toBe(createHash('sha256').update(data).digest('hex'));
      expect(readFileSync(join(shm, 'f.bin')).equals(Buffer.from(data))).toBe(true);
      expect(wantsDirectWrites(join(shm, 'f.bin'), 'auto')).toBe(false); // tmpfs is not a local disk file system
    } finally {
      await background.terminate();
      rmSync(shm, { recursive: true, force: true });
    }
  });

  it('write modes: cached never, direct always, anything else refused with the choices named', () => {
    expect(wantsDirectWrites(join(dir, 'x'), 'cached')).toBe(false);
    expect(wantsDirectWrites(join(dir, 'x'), 'direct')).toBe(true);
    expect(parseDiskWriteMode('auto')).toBe('auto');
    expect(() => parseDiskWriteMode('fast')).toThrow(/--disk-writes "fast" is not a write mode/);
  });
});
