import type { Command } from 'commander';
import { displayPath } from '../../record/record-snapshot.js';
import { runDemo } from '../../demo/demo.js';
import { nonNegativeInteger } from '../options.js';
import { cliIo, outputColumns } from '../io.js';
import { createProgressBar, formatDuration } from '../progress.js';
import { renderDemoSummary } from '../../demo/demo-summary.js';

/** `sonde demo`: the whole job on the built-in demo network. */
export function registerDemo(program: Command): void {
  program
    .command('demo')
    .description('run the whole job on the built-in demo network: a fitting and a held-out stimulus set, baselines, tuning, sensitivity, sweep with controls, schemes compared at one modulation size against shuffled, criterion-shift and fitted-ceiling references, diffs, report')
    .option('--out <dir>', 'output folder', 'snapshots/demo')
    .option('--quick', 'a small run (fewer displays, sites, kinds and strengths), under 30 s')
    .option('--seed <n>', 'seed of the fitting stimulus set (the held-out set uses seed + 1)', nonNegativeInteger, 2024)
    .option('--threads <n>', 'runtime threads (0: let the runtime choose)', nonNegativeInteger, 0)
    .action(async (opts: { out: string; quick?: boolean; seed: number; threads: number }) => {
      const io = cliIo();
      const started = performance.now();
      const steps = stepLog((line) => io.stderr(line));
      const bar = createProgressBar('demo');
      let result;
      try {
        result = await runDemo({
          out: opts.out,
          seed: opts.seed,
          threads: opts.threads,
          ...(opts.quick ? { quick: true } : {}),
          onStep: (step) => {
            bar.stop();
            steps.start(step);
          },
          onProgress: (done, total, detail) => bar.update(done, total, detail),
        });
      } finally {
        bar.stop();
      }
      steps.finish();
      io.stdout(`\n${renderDemoSummary(result, { width: outputColumns(), seconds: (performance.now() - started) / 1000, reportPath: displayPath(result.files.report!), folderPath: displayPath(result.folder) })}`);
    });
}

/**
 * The demo's step lines: "[k] what it does" as a step starts, and "[k] done in 12.3 s" — the step's own
 * duration, not the time since the start — when the next one starts or the demo ends.
 */
export function stepLog(write: (line: string) => void, now: () => number = () => performance.now()): { start(step: string): void; finish(): void } {
  let count = 0;
  let since = 0;
  const close = (): void => {
    if (count > 0) write(`[${count}] done in ${formatSeconds((now() - since) / 1000)}\n`);
  };
  return {
    start(step) {
      close();
      count++;
      since = now();
      write(`[${count}] ${step}\n`);
    },
    finish: close,
  };
}

function formatSeconds(seconds: number): string {
  return seconds < 60 ? `${seconds.toFixed(1)} s` : formatDuration(seconds);
}
