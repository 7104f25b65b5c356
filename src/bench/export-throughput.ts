import { execFileSync } from 'node:child_process';
import { join } from 'node:path';
import { writeSynthetic } from './diff-throughput.js';
import { PEAK_RSS_KB, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

/**
 * `sonde export` throughput and memory, side by side with `sonde check` of the same snapshot (the
 * reader's own pass: every layer file read and its SHA-256 checked, nothing written). Both run in a
 * child process with the page cache warm; peak RSS is the child's maximum resident set, to be compared
 * with the snapshot's size (the export streams, so memory must not grow with it).
 */
export async function benchExportThroughput(): Promise<BenchResult> {
  const work = scratch('sonde-bench-export-');
  try {
    const snapshot = join(work.folder, 'snap');
    const bytes = writeSynthetic(snapshot, 1, false);
    const run = (args: string[]) => {
      const script = `const { runCli } = await import(${JSON.stringify(new URL('../cli/run.js', import.meta.url).href)});
const t = performance.now();
const code = await runCli(${JSON.stringify(args)}, { stdout: () => {}, stderr: (s) => process.stderr.write(s) });
process.stdout.write(JSON.stringify({ code, seconds: (performance.now() - t) / 1000, maxRssKb: ${PEAK_RSS_KB} }));`;
      const result = JSON.parse(execFileSync(process.execPath, ['--input-type=module', '-e', script], { maxBuffer: 1 << 26 }).toString()) as { code: number; seconds: number; maxRssKb: number };
      if (result.code !== 0) throw new Error(`sonde ${args[0]} exited ${result.code}`);
      return result;
    };
    run(['check', snapshot]); // warm the page cache
    const check = run(['check', snapshot]);
    const out = join(work.folder, 'npy');
    const exported = run(['export', snapshot, '--out', out]);
    return {
      name: 'export-throughput',
      description: `sonde export of a generated snapshot (${(bytes / 1e9).toFixed(2)} GB, float32) to .npy, beside sonde check of the same snapshot (page cache warm)`,
      figures: {
        'snapshot data GB': bytes / 1e9,
        'export wall s': exported.seconds,
        'export MB/s': bytes / 1e6 / exported.seconds,
        'export peak RSS MB': exported.maxRssKb / 1024,
        'check wall s': check.seconds,
        'export / check time': exported.seconds / check.seconds,
      },
      targets: { 'export peak RSS MB': '<= 300' },
      notes: ['the export reads, hashes (the integrity check), writes and hashes (export.json lists each file\'s SHA-256) every byte once; check reads and hashes'],
    };
  } finally {
    work.dispose();
  }
}
