import { execFileSync } from 'node:child_process';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { createRandom } from '../random.js';
import { formatNpy } from '../stimuli/npy.js';

/** The committed reference models, relative to the package root. */
export const REFERENCE_FIXTURES = new URL('../../tests/reference/fixtures/', import.meta.url).pathname;

/** A scratch folder removed by `dispose`. */
export function scratch(prefix = 'sonde-bench-'): { folder: string; dispose: () => void } {
  const folder = mkdtempSync(join(tmpdir(), prefix));
  return { folder, dispose: () => rmSync(folder, { recursive: true, force: true }) };
}

/** Writes `count` seeded smooth random images [count, 3, size, size] as a float32 .npy and returns its path and data. */
export function benchStimuli(folder: string, count: number, size = 64, seed = 1): { path: string; data: Float32Array } {
  const rng = createRandom(seed);
  const plane = size * size;
  const data = new Float32Array(count * 3 * plane);
  for (let n = 0; n < count; n++) {
    for (let c = 0; c < 3; c++) {
      const fx = 1 + rng.uniform() * 4;
      const fy = 1 + rng.uniform() * 4;
      const phase = rng.uniform() * 6.283;
      const base = (n * 3 + c) * plane;
      for (let y = 0; y < size; y++) {
        for (let x = 0; x < size; x++) data[base + y * size + x] = 0.5 + 0.4 * Math.sin((fx * x + fy * y) / size * 6.283 + phase) + 0.1 * (rng.uniform() - 0.5);
      }
    }
  }
  const path = join(folder, 'stimuli.npy');
  writeFileSync(path, formatNpy(data, [count, 3, size, size]));
  return { path, data };
}

/**
 * JavaScript source of an expression for the ES-module scripts benchmarks run in child processes: the
 * child's own peak resident set in KiB — VmHWM from /proc/self/status (proc(5)), which belongs to the
 * address space the child's program got at execve. Not `process.resourceUsage().maxRSS`: getrusage(2)
 * metrics "are preserved across an execve(2)", and Node.js starts children by fork and exec, so maxRSS
 * reports at least the resident set the parent had when it forked (a bench process that holds a 553 MB
 * model gives every child at least that). Where /proc is missing, maxRSS is the fallback.
 */
export const PEAK_RSS_KB = `(await (async () => { try { const { readFileSync } = await import('node:fs'); return Number(/VmHWM:\\s+(\\d+)\\s+kB/.exec(readFileSync('/proc/self/status', 'utf8'))[1]); } catch { return process.resourceUsage().maxRSS; } })())`;

/** What `runInChild` measured of a child process. */
export interface ChildRun {
  /** Wall time of the whole process, Node.js start and imports included. */
  wallSeconds: number;
  /** Wall time of the body alone, inside the child. */
  bodySeconds: number;
  userSeconds: number;
  systemSeconds: number;
  /** The child's own peak resident set (PEAK_RSS_KB). */
  peakRssMb: number;
  /** What the body returned, as text ('' for nothing). */
  detail: string;
}

/**
 * Runs `body` (an async function body; `dist` is the compiled package folder URL) in a fresh Node.js
 * process with environment `env`, and returns its times, CPU time and peak RSS.
 */
export function runInChild(body: string, env: NodeJS.ProcessEnv = process.env): ChildRun {
  const dist = new URL('../', import.meta.url).href;
  const script = `const dist = ${JSON.stringify(dist)};
const t = performance.now();
const detail = await (async () => { ${body} })();
const bodySeconds = (performance.now() - t) / 1000;
const u = process.resourceUsage();
process.stdout.write(JSON.stringify({ bodySeconds, userSeconds: u.userCPUTime / 1e6, systemSeconds: u.systemCPUTime / 1e6, peakRssMb: ${PEAK_RSS_KB} / 1024, detail: String(detail ?? '') }));`;
  const start = performance.now();
  const out = execFileSync(process.execPath, ['--input-type=module', '-e', script], { maxBuffer: 1 << 26, stdio: ['ignore', 'pipe', 'inherit'], env }).toString();
  return { wallSeconds: (performance.now() - start) / 1000, ...(JSON.parse(out) as Omit<ChildRun, 'wallSeconds'>) };
}

/**
 * The record benchmarks' shared settings (record-overhead, record-huge-pages): SONDE_BENCH_RECORD_MODEL
 * (default the residual reference model), _STIMULI (1024), _BATCH (8), _REPEATS (3); the model loaded
 * and its input size (224 where the input's height is not fixed).
 */
export function recordBenchSettings(): { model: string; stimuliCount: number; batch: number; repeats: number; loaded: LoadedModel; size: number } {
  const model = process.env['SONDE_BENCH_RECORD_MODEL'] || join(REFERENCE_FIXTURES, 'residual.onnx');
  const loaded = loadModel(model);
  return {
    model,
    stimuliCount: Number(process.env['SONDE_BENCH_RECORD_STIMULI'] || 1024),
    batch: Number(process.env['SONDE_BENCH_RECORD_BATCH'] || 8),
    repeats: Number(process.env['SONDE_BENCH_RECORD_REPEATS'] || 3),
    loaded,
    size: typeof loaded.input.dims[2] === 'number' ? loaded.input.dims[2] : 224,
  };
}

/** Median of a few timings (seconds). */
export function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = Math.floor(sorted.length / 2);
  return sorted.length % 2 ? sorted[mid]! : (sorted[mid - 1]! + sorted[mid]!) / 2;
}
