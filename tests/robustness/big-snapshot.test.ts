/**
 * Diff memory stays bounded on a snapshot pair of several GB: the diff streams one batch per side, so
 * its peak resident memory must stay far below the data it reads. Writes ~5 GB, so it is skipped (with a
 * message saying why) when less than 10 GB are free, or when SONDE_SKIP_BIG_TESTS=1.
 */
import { execFileSync } from 'node:child_process';
import { mkdirSync, rmSync, statfsSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { PEAK_RSS_KB } from '../../src/bench/fixtures.js';
import { LayerFileWriter, manifestFields } from '../../src/snapshot/layer-file.js';
import { FORMAT_VERSION, writeManifest, type ManifestLayer, type SnapshotManifest } from '../../src/snapshot/manifest.js';
import { stimuliDigest, writeStimuliFile } from '../../src/snapshot/stimuli-file.js';
import { listingDigest } from '../../src/stimuli/source.js';
import { createRandom } from '../../src/random.js';
import { tempFolder } from '../helpers/onnx-builder.js';
import { ensureBuilt, ROOT } from './cli-process.js';

const STIMULI = 2000;
const SHAPE = [64, 32, 32]; // 256 KiB of float32 per stimulus and layer
const LAYERS = 5; // 2000 × 5 × 256 KiB = 2.6 GB per snapshot
const BATCH = 16;

const freeBytes = (() => {
  try {
    const s = statfsSync(tempFolder('sonde-free-'));
    return s.bavail * s.bsize;
  } catch {
    return 0;
  }
})();
const reason = process.env['SONDE_SKIP_BIG_TESTS'] === '1' ? 'SONDE_SKIP_BIG_TESTS=1 is set' : freeBytes < 10e9 ? `only ${(freeBytes / 1e9).toFixed(1)} GB free, it needs 10 GB` : null;
if (reason) console.log(`big-snapshot diff memory test skipped: ${reason}`);

/** Writes a synthetic snapshot: baseline values from a seeded pattern, the modulated one scaled by `gain`. */
function writeSnapshot(folder: string, gain: number, modulation: unknown): void {
  mkdirSync(join(folder, 'layers'), { recursive: true });
  const elements = SHAPE.reduce((a, b) => a * b, 1);
  const pattern = new Float32Array(elements * BATCH);
  const rng = createRandom('big');
  for (let i = 0; i < pattern.length; i++) pattern[i] = Math.max(0, rng.normal());
  const batch = new Float32Array(pattern.length);
  const layers: ManifestLayer[] = [];
  for (let l = 0; l < LAYERS; l++) {
    const entry: ManifestLayer = { name: `relu${l}`, op: 'Relu', depth: l, shape: SHAPE, dtype: 'float32', keep: 'full', file: `layers/${l}.arrow` };
    const writer = new LayerFileWriter(join(folder, entry.file), { name: entry.name, shape: SHAPE, dtype: 'float32', keep: 'full' });
    for (let first = 0; first < STIMULI; first += BATCH) {
      const shift = (first * 7919 + l * 104729) % pattern.length; // vary the data across batches cheaply
      for (let i = 0; i < batch.length; i++) batch[i] = pattern[(i + shift) % pattern.length]! * gain;
      writer.write(first, Math.min(BATCH, STIMULI - first), batch.subarray(0, Math.min(BATCH, STIMULI - first) * elements));
    }
    Object.assign(entry, manifestFields(entry.file, writer.finish()));
    layers.push(entry);
  }
  const digests = new Uint8Array(STIMULI * 32);
  const ids = Array.from({ length: STIMULI }, (_, i) => String(i));
  const labels = ids.map((_, i) => [i % 2 ? 'a' : 'b']);
  writeStimuliFile(join(folder, 'stimuli.arrow'), ids, labels, { digests });
  const manifest: SnapshotManifest = {
    format: FORMAT_VERSION,
    tool: { name: 'sonde', version: 'test' },
    model: { file: 'synthetic.onnx', sha256: '0'.repeat(64), input: { name: 'input', shape: [3, 32, 32] } },
    stimuli: { source: 'synthetic', count: STIMULI, digest: stimuliDigest(digests), listingDigest: listingDigest({ ids, labels }), categories: ['a', 'b'] },
    preprocessing: null,
    modulation,
    readout: null,
    baseline: null,
    run: { mode: 'full', batch: BATCH, threads: 0 },
    created: new Date().toISOString(),
    layers,
    complete: true,
  };
  writeManifest(folder, manifest);
}

describe.skipIf(reason !== null)('diff on a snapshot pair of several GB', () => {
  it('diffSnapshots on 2 × 2.6 GB keeps its peak resident memory under 768 MiB (measured: 175 MiB)', () => {
    ensureBuilt();
    const dir = tempFolder('sonde-big-');
    try {
      writeSnapshot(join(dir, 'base'), 1, null);
      writeSnapshot(join(dir, 'mod'), 1.1, { modulations: [{ site: 'relu0' }] });
      const script = `import { diffSnapshots } from ${JSON.stringify(join(ROOT, 'dist', 'index.js'))};
        const report = await diffSnapshots({ base: ${JSON.stringify(join(dir, 'base'))}, mod: ${JSON.stringify(join(dir, 'mod'))}, bootstrap: 0 });
        process.stdout.write(JSON.stringify({ rssKiB: ${PEAK_RSS_KB}, change: report.layers.map((l) => l.relativeChange) }));`;
      const out = JSON.parse(execFileSync(process.execPath, ['--input-type=module', '-e', script], { encoding: 'utf8', maxBuffer: 1 << 20 })) as { rssKiB: number; change: number[] };
      // exact property: mod = 1.1 · base everywhere, so ‖b − a‖/‖a‖ = 0.1 (float32 rounding of 1.1·x)
      for (const c of out.change) expect(c).toBeCloseTo(0.1, 6);
      console.log(`big-snapshot diff: peak RSS ${(out.rssKiB / 1024).toFixed(0)} MiB for ${(2 * STIMULI * LAYERS * 256 / 1024 / 1024).toFixed(1)} GiB of activations`);
      expect(out.rssKiB).toBeLessThan(768 * 1024);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  }, 900_000);
});
