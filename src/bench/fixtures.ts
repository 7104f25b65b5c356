import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
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

/** Median of a few timings (seconds). */
export function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = Math.floor(sorted.length / 2);
  return sorted.length % 2 ? sorted[mid]! : (sorted[mid - 1]! + sorted[mid]!) / 2;
}
