/**
 * `npm run bench`: runs every benchmark side by side in one process and prints their figures, with
 * the targets they are held to. `npm run bench -- NAME...` runs only those. Results also go to
 * `bench-results.json` in the working folder.
 *
 * The benchmarks run with the malloc setting `bin/sonde` gives every command (src/malloc-arenas.ts):
 * where GLIBC_TUNABLES does not set it, this process starts itself again with it (glibc reads the
 * tunables once, at process start), so the in-process figures and every child process measure what a
 * user's commands run with.
 */
import { spawnSync } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { arenaSetting, withSondeMalloc } from '../malloc-arenas.js';
import { BENCHMARKS } from './registry.js';
import type { BenchResult } from './types.js';

if (arenaSetting() === undefined) {
  const again = spawnSync(process.execPath, [...process.execArgv, ...process.argv.slice(1)], { stdio: 'inherit', env: withSondeMalloc() });
  process.exit(again.status ?? 1);
}

const wanted = process.argv.slice(2);
const results: BenchResult[] = [];
for (const [name, bench] of Object.entries(BENCHMARKS)) {
  if (wanted.length > 0 && !wanted.includes(name)) continue;
  process.stderr.write(`bench ${name} …\n`);
  const result = await bench();
  results.push(result);
  process.stdout.write(`\n## ${result.name}: ${result.description}\n`);
  for (const [figure, value] of Object.entries(result.figures)) {
    const target = result.targets?.[figure];
    process.stdout.write(`  ${figure.padEnd(40)} ${formatNumber(value).padStart(12)}${target ? `   (target ${target})` : ''}\n`);
  }
  for (const note of result.notes ?? []) process.stdout.write(`  - ${note}\n`);
}
writeFileSync('bench-results.json', `${JSON.stringify(results, null, 2)}\n`);

function formatNumber(value: number): string {
  if (!Number.isFinite(value)) return String(value);
  if (Math.abs(value) >= 1000) return value.toFixed(0);
  if (Math.abs(value) >= 10) return value.toFixed(1);
  return value.toFixed(3);
}
