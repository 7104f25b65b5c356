import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { parseShard } from '../../record/shard.js';
import { displayPath } from '../../record/record-snapshot.js';
import { resolveOutFolder } from '../../outputs/output-folder.js';
import { MAX_SWEEP_CELLS, parseSweepMeasure, sweepModulations } from '../../replay/sweep.js';
import { renderSweep } from '../../report/sweep-table.js';
import { nonNegativeInteger, positiveInteger, siteList } from '../options.js';
import { createProgressBar } from '../progress.js';
import { cliIo, outputColumns } from '../io.js';
import { READOUT_MAP_FLAGS, READOUT_MAP_HELP, readoutMapOption } from '../readout-map-option.js';

interface SweepCliOptions {
  from: string;
  sites: string[];
  schemes?: string;
  strengths: string;
  task: string;
  tuning?: string;
  readoutMap?: string;
  sensitivity?: string;
  controlSeeds: number;
  depthProfile?: boolean;
  match?: string;
  measure?: string;
  out: string;
  restart?: boolean;
  threads: number;
  vectors: number;
  runMemory?: number;
  shard?: string;
  json?: boolean;
}

/** Parses "0,0.1,0.2" or a range "0:1:0.25" (start:stop:step, inclusive). */
export function parseStrengths(text: string): number[] {
  const range = /^\s*(-?[\d.]+):(-?[\d.]+):([\d.]+)\s*$/.exec(text);
  if (range) {
    const [start, stop, step] = [Number(range[1]), Number(range[2]), Number(range[3])];
    if (!(step > 0) || !Number.isFinite(start) || !Number.isFinite(stop)) throw new UsageError('E_STRENGTHS', `--strengths ${text}: a range is start:stop:step with step > 0`);
    // start:step:stop (as some languages write ranges) reads here as a stop below start + step: one strength or none
    if (stop < start || (step > stop - start && stop !== start)) {
      throw new UsageError('E_STRENGTHS', `--strengths ${text}: a range is start:stop:step (step last), so this gives ${stop < start ? 'no strength' : `only ${start}`}`, { hint: `for ${start} to ${step} in steps of ${stop}, write --strengths ${start}:${step}:${stop}` });
    }
    // counted before any is made: a tiny step would otherwise fill the heap
    const count = Math.floor((stop - start) / step + 1e-9) + 1;
    if (count > MAX_SWEEP_CELLS) throw new UsageError('E_SWEEP_SIZE', `--strengths ${text} gives ${count.toExponential(2)} strengths, more than the ${MAX_SWEEP_CELLS} cells a sweep may have`, { hint: 'use a larger step' });
    const values: number[] = [];
    for (let i = 0; start + i * step <= stop + 1e-9; i++) values.push(Number((start + i * step).toFixed(10)));
    return values;
  }
  const values = text.split(',').map((s) => Number(s.trim()));
  if (text.trim() === '' || values.some((v) => !Number.isFinite(v))) throw new UsageError('E_STRENGTHS', `--strengths "${text}" must be numbers like 0,0.1,0.2 or a range like 0:1:0.1`);
  return values;
}

/** `sonde sweep MODEL --from BASE ...`: task performance over sites × schemes × strengths × categories. */
export function registerSweep(program: Command): void {
  program
    .command('sweep')
    .description('sweep modulation schemes and strengths over sites and cued categories, replaying only the downstream part')
    .argument('<model>', 'ONNX model file (the baseline\'s)')
    .requiredOption('--from <baseline>', 'baseline snapshot detection is measured on (sites and everything downstream recorded at full resolution); tables made from another snapshot give a held-out evaluation')
    .requiredOption('--sites <list>', 'site tensors, comma-separated (the option may be repeated), or all-activations', siteList)
    .option('--schemes <list>', 'comma-separated: tuning, sensitivity, shuffled (g = max(0, 1 + β·v)), uniform (g = 1 + β on every channel, i.e. a spec\'s kind: uniform with gain: 1 + β); default: those whose tables are given')
    .option('--strengths <list>', 'strengths β: a list 0,0.1,0.2 or a range start:stop:step with both ends included, e.g. 0:0.5:0.1 (the step comes last)', '0,0.1,0.2,0.3,0.4,0.5')
    .requiredOption('--task <task>', 'detect:CATEGORY[,CATEGORY…] or detect:all (each cued in turn)')
    .option('--tuning <table>', 'tuning table (sonde tune) for the tuning and shuffled schemes')
    .option('--sensitivity <table>', 'sensitivity table (sonde sense) for the sensitivity scheme')
    .option('--control-seeds <n>', 'seeds of the shuffled control', positiveInteger, 3)
    .option('--depth-profile', 'also measure relative change and signature slope per layer below the site')
    .option('--match <target>', 'calibrate: smallest strength reaching auc:+X, dprime:+X or accuracy:+Xpp')
    .option('--measure <name>', 'what best cells and the tuning-vs-shuffled control rank by: auc (ROC area, threshold-free) or dprime (d′ at the fixed threshold)', 'auc')
    .requiredOption('--out <dir>', 'result folder: NAME without a slash is snapshots/NAME (cells.arrow, sweep.json; cells.jsonl lets an interrupted sweep resume)')
    .option('--restart', 'ignore finished cells in --out and start again')
    .option('--threads <n>', 'runtime threads (0: let the runtime choose)', nonNegativeInteger, 0)
    .option('--vectors <n>', 'gain vectors per pass over the stimuli', positiveInteger, 16)
    .option('--run-memory <MB>', 'MB of tensors one runtime call may hold (default 512): fewer vectors or stimuli per call where they would exceed it', positiveInteger)
    .option('--shard <k/n>', 'only the K-th of N contiguous parts of the cells (job arrays; merge by concatenating cells.jsonl)')
    .option(READOUT_MAP_FLAGS, `${READOUT_MAP_HELP}; the tables must be made under the same map`)
    .option('--json', 'print sweep.json to stdout')
    .action(async (model: string, opts: SweepCliOptions) => {
      const io = cliIo();
      const shard = opts.shard ? parseShard(opts.shard) : undefined;
      const bar = createProgressBar('sweep');
      let result;
      try {
        result = await sweepModulations({
          model,
          from: opts.from,
          sites: opts.sites.length === 1 && opts.sites[0] === 'all-activations' ? 'all-activations' : opts.sites,
          strengths: parseStrengths(opts.strengths),
          task: opts.task,
          controlSeeds: opts.controlSeeds,
          measure: parseSweepMeasure(opts.measure),
          out: opts.out,
          threads: opts.threads,
          vectorsPerRun: opts.vectors,
          ...(opts.runMemory ? { runBytes: opts.runMemory * 2 ** 20 } : {}),
          onProgress: (p) => bar.update(p.cellsDone, p.cellsTotal, 'cells'),
          ...(opts.schemes ? { schemes: opts.schemes.split(',').map((s) => s.trim()) } : {}),
          ...(opts.tuning ? { tuning: opts.tuning } : {}),
          ...(opts.readoutMap !== undefined ? { readoutMap: readoutMapOption(opts.readoutMap) } : {}),
          ...(opts.sensitivity ? { sensitivity: opts.sensitivity } : {}),
          ...(opts.depthProfile ? { depthProfile: true } : {}),
          ...(opts.match ? { match: opts.match } : {}),
          ...(opts.restart ? { restart: true } : {}),
          ...(shard ? { shard } : {}),
        });
      } finally {
        bar.stop();
      }
      if (opts.json) {
        io.stdout(`${JSON.stringify(result, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
        return;
      }
      io.stdout(renderSweep(result, { width: outputColumns(), out: displayPath(resolveOutFolder(opts.out)) }));
    });
}
