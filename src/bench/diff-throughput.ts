import { execFileSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { mkdirSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { LayerFileWriter } from '../snapshot/layer-file.js';
import { FORMAT_VERSION, writeManifest, type SnapshotManifest } from '../snapshot/manifest.js';
import { stimuliDigest, writeStimuliFile } from '../snapshot/stimuli-file.js';
import { listingDigest } from '../stimuli/source.js';
import { TOOL_VERSION } from '../version.js';
import { PEAK_RSS_KB, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const LAYERS: Array<{ name: string; shape: number[] }> = [
  { name: 'block1', shape: [64, 32, 32] },
  { name: 'block2', shape: [128, 16, 16] },
  { name: 'block3', shape: [256, 8, 8] },
  { name: 'head', shape: [512] },
];
const STIMULI = 2800;
const BATCH = 32;

/** Writes a synthetic snapshot: deterministic non-negative activations; `gain` scales channels 0..C/2 of every layer. */
export function writeSynthetic(folder: string, gain: number, modulated: boolean): number {
  mkdirSync(join(folder, 'layers'), { recursive: true });
  const ids = Array.from({ length: STIMULI }, (_, i) => String(i));
  const labels = ids.map((_, i) => [i % 2 ? 'odd' : 'even']);
  let bytes = 0;
  const layers = LAYERS.map((layer, depth) => {
    const file = `layers/${String(depth).padStart(3, '0')}-${layer.name}.arrow`;
    const writer = new LayerFileWriter(join(folder, file), { name: layer.name, shape: layer.shape, dtype: 'float32', keep: 'full' });
    const elements = layer.shape.reduce((a, b) => a * b, 1);
    const channels = layer.shape[0]!;
    const spatial = elements / channels;
    const data = new Float32Array(BATCH * elements);
    for (let first = 0; first < STIMULI; first += BATCH) {
      const rows = Math.min(BATCH, STIMULI - first);
      for (let r = 0; r < rows; r++) {
        for (let c = 0; c < channels; c++) {
          const scale = modulated && c < channels / 2 ? gain : 1;
          const base = (r * channels + c) * spatial; // [r, c, s]
          for (let s = 0; s < spatial; s++) data[base + s] = scale * (((first + r) * 31 + c * 7 + s * 3) % 97) / 97;
        }
      }
      writer.write(first, rows, data.subarray(0, rows * elements));
    }
    const result = writer.finish();
    bytes += result.bytes;
    return { name: layer.name, op: 'Relu', depth, shape: layer.shape, dtype: 'float32' as const, keep: 'full' as const, file, sha256: result.sha256, bytes: result.bytes, rows: result.rows };
  });
  // synthetic per-stimulus digests (of the id): readers verify the table against the manifest
  const digests = new Uint8Array(STIMULI * 32);
  ids.forEach((id, i) => digests.set(createHash('sha256').update(id).digest(), i * 32));
  const table = writeStimuliFile(join(folder, 'stimuli.arrow'), ids, labels, { digests });
  const manifest: SnapshotManifest = {
    format: FORMAT_VERSION,
    tool: { name: 'sonde', version: TOOL_VERSION },
    model: { file: 'synthetic.onnx', sha256: '0'.repeat(64), input: { name: 'input', shape: [3, 64, 64] } },
    stimuli: { source: 'synthetic', count: STIMULI, digest: stimuliDigest(digests), listingDigest: listingDigest({ ids, labels }), categories: ['even', 'odd'], table: { sha256: table.sha256, bytes: table.bytes } },
    preprocessing: null,
    modulation: modulated ? { spec: 'synthetic', modulations: [{ site: 'block1' }] } : null,
    readout: null,
    baseline: null,
    run: { mode: 'full', batch: BATCH, threads: 0 },
    created: new Date().toISOString(),
    layers,
    complete: true,
  };
  writeManifest(folder, manifest);
  return bytes;
}

/**
 * Diff throughput and memory: two generated snapshots (≈ 1.2 GB each) are diffed by the CLI in a child
 * process; MB/s counts the layer bytes of both sides; peak RSS is the child's maximum resident set.
 */
export async function benchDiffThroughput(): Promise<BenchResult> {
  const work = scratch();
  try {
    const base = join(work.folder, 'base');
    const mod = join(work.folder, 'mod');
    const bytes = writeSynthetic(base, 1, false) + writeSynthetic(mod, 1.5, true);
    const cli = fileURLToPath(new URL('../cli/main.js', import.meta.url));
    // warm the page cache once, as a re-analysis of a recent recording would find it
    execFileSync(process.execPath, [cli, 'diff', base, mod, '--bootstrap', '0', '--json'], { maxBuffer: 1 << 26 });
    const timed = (extra: string[]) => {
      const script = `const { runCli } = await import(${JSON.stringify(new URL('../cli/run.js', import.meta.url).href)});
const t = performance.now();
const code = await runCli(['diff', ${JSON.stringify(base)}, ${JSON.stringify(mod)}, '--bootstrap', '0', '--json'${extra.map((e) => `, ${JSON.stringify(e)}`).join('')}], { stdout: () => {}, stderr: (s) => process.stderr.write(s) });
process.stdout.write(JSON.stringify({ code, seconds: (performance.now() - t) / 1000, maxRssKb: ${PEAK_RSS_KB} }));`;
      const result = JSON.parse(execFileSync(process.execPath, ['--input-type=module', '-e', script], { maxBuffer: 1 << 26 }).toString()) as { code: number; seconds: number; maxRssKb: number };
      if (result.code !== 0) throw new Error(`diff exited ${result.code}`);
      return result;
    };
    // the default checks every layer file's SHA-256 (in worker threads, alongside the diff); the
    // opt-in --skip-sha256 checks sizes only: the difference is what the hashing costs
    const out = timed([]);
    const sizeOnly = timed(['--skip-sha256']);
    return {
      name: 'diff-throughput',
      description: `sonde diff of two generated snapshots, ${STIMULI} stimuli, ${LAYERS.length} layers, ${(bytes / 1e9).toFixed(2)} GB read in all (page cache warm)`,
      figures: {
        'snapshot data GB': bytes / 1e9,
        'wall s': out.seconds,
        'throughput MB/s': bytes / 1e6 / out.seconds,
        'peak RSS MB': out.maxRssKb / 1024,
        'throughput MB/s with --skip-sha256': bytes / 1e6 / sizeOnly.seconds,
        'SHA-256 check cost %': (100 * (out.seconds - sizeOnly.seconds)) / sizeOnly.seconds,
      },
      targets: { 'throughput MB/s': '>= 1000', 'peak RSS MB': '<= 300' },
      notes: [`layer files: ${LAYERS.map((l) => `${l.name} [${l.shape.join('×')}]`).join(', ')}; base file size ${(statSync(join(base, 'layers', '000-block1.arrow')).size / 1e6).toFixed(0)} MB for the largest layer`],
    };
  } finally {
    work.dispose();
  }
}
