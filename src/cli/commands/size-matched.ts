/**
 * `sonde size-matched MODEL --fit BASE --from HELDOUT --sites … --tuning T`: gain schemes compared at
 * one size of site modulation on held-out stimuli, beside shuffled, criterion-shift and fitted-ceiling
 * references; writes the JSON `sonde report` reads.
 */
import type { Command } from 'commander';
import { fixed, signed } from '../../format.js';
import { runSizeMatched } from '../../replay/size-matched-run.js';
import { fitTable, wrapText } from '../../report/terminal-table.js';
import { finiteNumber, nonNegativeInteger, positiveInteger } from '../options.js';
import { cliIo, outputColumns } from '../io.js';
import { createProgressBar } from '../progress.js';
import { READOUT_MAP_FLAGS, READOUT_MAP_HELP, readoutMapOption } from '../readout-map-option.js';

interface SizeMatchedCliOptions {
  fit: string;
  from: string;
  sites: string;
  allSites?: string;
  size: number;
  task: string;
  tuning: string;
  readoutMap?: string;
  sensitivity?: string;
  controlSeeds: number;
  resamples: number;
  seed: number;
  out: string;
  force?: boolean;
  threads: number;
  json?: boolean;
}

const list = (text: string): string[] => text.split(',').map((s) => s.trim()).filter((s) => s.length > 0);

/** Registers `sonde size-matched`. */
export function registerSizeMatched(program: Command): void {
  program
    .command('size-matched')
    .description('compare gain schemes at one size of site modulation on held-out stimuli, with shuffled, criterion-shift and fitted-ceiling references')
    .argument('<model>', 'ONNX model file (both baselines\')')
    .requiredOption('--fit <baseline>', 'baseline the tables were computed from (the ceiling is fitted on it and its mean activity weights the size)')
    .requiredOption('--from <baseline>', 'baseline detection is measured on (held out when it is another stimulus set than --fit)')
    .requiredOption('--sites <list>', 'comma-separated sites, each compared on its own')
    .option('--all-sites <list>', 'also tuning-based gain at all these sites at once, each with 1/S of the size (and its shuffled counterpart)')
    .option('--size <fraction>', 'weighted mean |g − 1| every gain is scaled to at its site', finiteNumber, 0.1)
    .option('--task <task>', 'detect:all (every category with a readout unit, stimuli and table values) or detect:A,B', 'detect:all')
    .requiredOption('--tuning <table>', 'tuning table (sonde tune) of the --fit baseline')
    .option('--sensitivity <table>', 'sensitivity table (sonde sense) of the --fit baseline: adds the sensitivity rows')
    .option('--control-seeds <n>', 'seeds of the shuffled control', positiveInteger, 3)
    .option('--resamples <n>', 'bootstrap resamples over the held-out stimuli', positiveInteger, 500)
    .option('--seed <n>', 'seed of the bootstrap', nonNegativeInteger, 1)
    .requiredOption('--out <file.json>', 'write the comparison here (read by sonde report; an existing file only with --force)')
    .option(READOUT_MAP_FLAGS, `${READOUT_MAP_HELP}; the tables must be made under the same map`)
    .option('--force', 'replace an existing --out file')
    .option('--threads <n>', 'runtime threads (0: let the runtime choose)', nonNegativeInteger, 0)
    .option('--json', 'print the comparison JSON to stdout')
    .action(async (model: string, opts: SizeMatchedCliOptions) => {
      const io = cliIo();
      io.stderr(`comparing at ${fixed(100 * opts.size, 1)} % site modulation: fitting ceilings on ${opts.fit}, measuring on ${opts.from}\n`);
      const bar = createProgressBar('size-matched');
      let c;
      try {
        c = await runSizeMatched({
          model,
          fit: opts.fit,
          from: opts.from,
          sites: list(opts.sites),
          ...(opts.allSites !== undefined ? { allSites: list(opts.allSites) } : {}),
          size: opts.size,
          task: opts.task,
          tuning: opts.tuning,
          ...(opts.readoutMap !== undefined ? { readoutMap: readoutMapOption(opts.readoutMap) } : {}),
          ...(opts.sensitivity !== undefined ? { sensitivity: opts.sensitivity } : {}),
          controlSeeds: opts.controlSeeds,
          resamples: opts.resamples,
          seed: opts.seed,
          threads: opts.threads,
          out: opts.out,
          ...(opts.force ? { force: true } : {}),
          onProgress: (done, total, detail) => bar.update(done, total, detail),
        });
      } finally {
        bar.stop();
      }
      if (opts.json) {
        io.stdout(`${JSON.stringify(c, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
        return;
      }
      const width = outputColumns();
      const interval = (i: { estimate: number; low: number; high: number }) => `${signed(i.estimate, 3)} [${signed(i.low, 3)}, ${signed(i.high, 3)}]`;
      const rows = c.effects.map((e) => [e.site, e.scheme, `${fixed(100 * e.size, 1)} %`, interval(e.aucChange), e.fractionOfCeiling === null ? '' : fixed(e.fractionOfCeiling, 2), signed(e.hitRatePp, 1), signed(e.falseAlarmRatePp, 1), signed(e.criterionShiftHitRatePp, 1)]);
      const mapped = c.readoutMap ? `; categories scored by readout map ${c.readoutMap.name} (log-sum-exp of their units)` : '';
      const held = c.heldOut ? `held out (gains from ${c.fitSet}, detection on ${c.heldOutSet})` : `NOT held out: gains and detection on the same stimuli (${c.heldOutSet})`;
      io.stdout(`${wrapText(`${held}; unmodulated ROC area ${fixed(c.baseAuc, 3)} (mean over ${c.categories.length} cued categories${mapped}); every gain scaled to ${fixed(100 * c.size, 1)} % mean |g − 1| at its site; ΔAUC with ${Math.round(100 * c.level)} % bootstrap intervals over ${c.resamples} resamples of the held-out stimuli`, width)}\n`);
      io.stdout(`${fitTable(['site', 'scheme', 'size', 'ΔAUC [95 %]', 'of ceiling', 'Δhit pp', 'Δfalse alarm pp', 'criterion shift Δhit pp'], rows, { width, keyColumns: 2 })}\n`);
      for (const v of c.versusShuffled) io.stdout(`${v.site}: tuning − shuffled ΔAUC ${interval(v.difference)}${v.difference.low > 0 ? ' (above the shuffled control)' : v.difference.high < 0 ? ' (below the shuffled control)' : ' (not separated from the shuffled control)'}\n`);
      io.stdout(`criterion shift: a constant shift of the baseline readout with the same false-alarm rate; it changes hit rates but never the ROC area\ncomparison: ${opts.out} (sonde report ${opts.out} --out report.html)\n`);
    });
}
