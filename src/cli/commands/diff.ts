import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { diffSnapshots } from '../../compare/diff-snapshots.js';
import { nonFiniteFailure } from '../../compare/diff-verdict.js';
import { type DiffOptions, type DiffReport, type SchemeComparison } from '../../compare/diff-types.js';
import { diffToCsv, renderComparison, renderDiffReport, reportToJson } from '../../report/diff-table.js';
import { renderSpatialProfiles } from '../../report/spatial-table.js';
import { windowSpatialProfiles } from '../../compare/spatial-profiles.js';
import { finiteNumber, nonNegativeInteger } from '../options.js';
import { createProgressBar } from '../progress.js';
import { cliIo, outputColumns } from '../io.js';
import { tuningLookup } from './tuning-lookup.js';
import { diffPartial } from '../../compare/partials.js';
import { writePartial } from '../../record/partial-file.js';
import { parseShard } from '../../record/shard.js';
import { parseSweepMeasure } from '../../replay/sweep.js';
import { assertOutFileWritable } from '../../outputs/output-file.js';
import { replaceFile } from '../../disk/atomic-file.js';
import { openSnapshot, type Snapshot } from '../../snapshot/snapshot.js';
import { READOUT_MAP_FLAGS, READOUT_MAP_HELP, readoutMapOption } from '../readout-map-option.js';

interface DiffCliOptions {
  vs?: string;
  floor?: string;
  tuning?: string;
  target?: string;
  task?: string;
  bootstrap: number;
  seed: number;
  tolerance: number;
  threshold?: string;
  measure: string;
  json?: boolean;
  csv?: string;
  force?: boolean;
  shard?: string;
  partial?: string;
  skipSha256?: boolean;
  readoutMap?: string;
}

/** `sonde diff BASE MOD`: layer-by-layer propagation of a modulation and its effect on the task. */
export function registerDiff(program: Command): void {
  program
    .command('diff')
    .description('compare a modulated snapshot with its baseline layer by layer (and a second scheme with --vs)')
    .argument('<base>', 'baseline snapshot folder')
    .argument('<mod>', 'modulated snapshot folder (recorded with --from BASE)')
    .option('--vs <mod2>', 'a second modulated snapshot, compared side by side with MOD')
    .option('--floor <snapshot>', 'a pairing that should show no effect (gain-1 re-run, shuffled control): its change is the noise floor')
    .option('--tuning <table>', 'tuning table (from `sonde tune`) for the feature-similarity-gain signature')
    .option('--target <category>', 'attended category (signature, and default task detect:CATEGORY)')
    .option('--task <task>', 'detect:CATEGORY[,CATEGORY…], detect:all or labels')
    .option('--threshold <value>', 'decision threshold: a number, "best" (accuracy-maximising on the baseline) or "auto" (model sidecar, else best)', 'auto')
    .option('--measure <name>', 'detection measure the verdict and --vs lead with: auc (ROC area, threshold-free) or dprime (d′ at the fixed threshold)', 'auc')
    .option('--bootstrap <n>', 'bootstrap resamples over stimuli (0: none)', nonNegativeInteger, 1000)
    .option('--seed <n>', 'bootstrap seed', nonNegativeInteger, 0)
    .option('--tolerance <x>', 'ratio tolerance for up/down (of channel means, or feature means at token layers)', finiteNumber, 0.01)
    .option('--json', 'print the full report as JSON')
    .option('--csv <file>', 'also write one CSV row per layer (an existing file only with --force)')
    .option('--force', 'replace an existing --csv file')
    .option('--shard <K/N>', 'with --partial: accumulate only shard K of N of the stimuli')
    .option('--partial <file.json>', 'write mergeable partial statistics instead of the report (combine them with `sonde merge`)')
    .option(READOUT_MAP_FLAGS, READOUT_MAP_HELP)
    .option('--skip-sha256', 'faster: check each layer file against the manifest by size only, not by SHA-256 (a same-size change then goes unnoticed)')
    .action(async (basePath: string, modPath: string, opts: DiffCliOptions) => {
      const io = cliIo();
      if (opts.tuning && !opts.target) throw new UsageError('E_TARGET', '--tuning needs --target CATEGORY (the attended category)');
      let threshold: DiffOptions['threshold'] = 'auto';
      if (opts.threshold !== undefined && opts.threshold !== 'auto') {
        if (opts.threshold === 'best') threshold = 'best';
        else if (Number.isFinite(Number(opts.threshold))) threshold = Number(opts.threshold);
        else throw new UsageError('E_THRESHOLD', `--threshold must be a number, "best" or "auto", got "${opts.threshold}"`);
      }
      // refuse an existing --csv (or one that is an input) before the diff runs
      if (opts.csv !== undefined) assertOutFileWritable(opts.csv, { option: '--csv', force: opts.force ?? false, inputs: [{ option: 'BASE', path: basePath }, { option: 'MOD', path: modPath }, { option: '--vs', path: opts.vs }, { option: '--floor', path: opts.floor }, { option: '--tuning', path: opts.tuning }] });
      // default: every layer file's size and SHA-256 are checked as it is read; --skip-sha256 only its size
      const open = (path: string): string | Snapshot => (opts.skipSha256 ? openSnapshot(path, { verify: 'size-only' }) : path);
      const bar = createProgressBar('diff');
      const options: DiffOptions = {
        base: open(basePath),
        mod: open(modPath),
        bootstrap: opts.bootstrap,
        seed: opts.seed,
        tolerance: opts.tolerance,
        threshold,
        measure: parseSweepMeasure(opts.measure),
        onLayer: (done, total, name) => bar.update(done, total, name),
        ...(opts.floor ? { floor: open(opts.floor) } : {}),
        ...(opts.target ? { target: opts.target } : {}),
        ...(opts.task ? { task: opts.task } : {}),
        ...(opts.readoutMap !== undefined ? { readoutMap: readoutMapOption(opts.readoutMap) } : {}),
        ...(opts.tuning && opts.target ? { tuning: tuningLookup(opts.tuning, opts.target) } : {}),
      };
      if (opts.shard !== undefined && opts.partial === undefined) throw new UsageError('E_PARTIAL', '--shard needs --partial FILE.json (where the shard\'s statistics go)', { hint: 'merge the files with `sonde merge`' });
      if (opts.partial !== undefined) {
        if (opts.vs !== undefined) throw new UsageError('E_PARTIAL', '--partial cannot be combined with --vs; write one partial diff per modulated snapshot');
        const shard = opts.shard !== undefined ? parseShard(opts.shard) : { index: 1, count: 1 };
        let partial;
        try {
          partial = await diffPartial(options, shard);
        } finally {
          bar.stop();
        }
        const written = writePartial(opts.partial, partial);
        io.stdout(`wrote partial diff statistics of shard ${shard.index}/${shard.count} (stimuli ${partial.shard.stimuli[0]}..${partial.shard.stimuli[1]}) to ${opts.partial} (${written.bytes} bytes)\n`);
        return;
      }
      let result: DiffReport | SchemeComparison;
      try {
        result = opts.vs ? await diffSnapshots({ ...options, vs: open(opts.vs) }) : await diffSnapshots(options);
      } finally {
        bar.stop();
      }
      const single = 'verdict' in result && 'layers' in result && !('a' in result) ? (result as DiffReport) : null;
      if (opts.csv) replaceFile(opts.csv, diffToCsv(single ?? (result as SchemeComparison).a));
      // a windowed modulation: the change by distance from the window's centre, per spatial layer below the site
      const spatial = single ? await windowSpatialProfiles(typeof options.base === 'string' ? openSnapshot(options.base) : options.base, typeof options.mod === 'string' ? openSnapshot(options.mod) : options.mod) : null;
      if (opts.json) io.stdout(reportToJson(spatial ? { ...result, spatialProfile: spatial } : result));
      else io.stdout(`${single ? renderDiffReport(single, { width: outputColumns() }) : renderComparison(result as SchemeComparison, [modPath, opts.vs!], { width: outputColumns() })}${spatial ? renderSpatialProfiles(spatial, { width: outputColumns() }) : ''}`);
      // non-finite data: the report is printed (it shows where), but the run fails so no script takes it as an answer
      for (const [report, path] of single ? [[single, modPath] as const] : [[(result as SchemeComparison).a, modPath] as const, [(result as SchemeComparison).b, opts.vs!] as const]) {
        const failure = nonFiniteFailure(report, `diff ${basePath} ${path}`);
        if (failure) throw failure;
      }
    });
}
