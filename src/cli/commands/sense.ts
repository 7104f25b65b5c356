/**
 * `sonde sense MODEL --site TENSOR --readout OUTPUT[:CATEGORY|INDEX] --out FILE.arrow`: causal gain (or
 * offset) sensitivities of every channel of a site for each readout category: exact derivatives by
 * reverse-mode gradients compiled into the ONNX graph by default (src/replay/sense-exact.ts), or finite
 * differences through the injected gain input with --method richardson / secant (see src/replay/sense.ts).
 */
import Table from 'cli-table3';
import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { displayPath } from '../../record/record-snapshot.js';
import { ALL_ACTIVATIONS } from '../../replay/sense-plan.js';
import { DEFAULT_OFFSET_STEP, DEFAULT_ROWS_PER_RUN, DEFAULT_STEP, defaultStep, DEFAULT_WARN_RATIO, SENSE_METHODS, type SenseMethod, type SenseOptions } from '../../replay/sense-types.js';
import { senseSites } from '../../replay/sense.js';
import { parseChannelList, parseShape } from '../../stimuli/preprocess.js';
import { nonNegativeInteger, positiveInteger, siteList } from '../options.js';
import { createProgressBar } from '../progress.js';
import { cliIo } from '../io.js';
import { sensePartial } from '../../replay/sense-partial.js';
import { writePartial } from '../../record/partial-file.js';
import { parseShard } from '../../record/shard.js';
import { READOUT_MAP_FLAGS, READOUT_MAP_HELP, readoutMapOption } from '../readout-map-option.js';
import { READOUT_MAP_KEY } from '../../snapshot/tables.js';

interface SenseCliOptions {
  stimuli?: string;
  labels?: string;
  from?: string;
  site?: string[];
  sites?: string[];
  readout?: string;
  kind: string;
  step?: string;
  method: string;
  stimuliOf?: string;
  per?: string;
  out?: string;
  force?: boolean;
  shard?: string;
  partial?: string;
  rows: number;
  batch: number;
  runMemory?: number;
  threads: number;
  inputShape?: string;
  mean?: string;
  std?: string;
  bgr?: boolean;
  json?: boolean;
  readoutMap?: string;
}

/** Registers `sonde sense`. */
export function registerSense(program: Command): void {
  program
    .command('sense')
    .description('derivative of each readout category with respect to a gain (or offset) on each channel of a site: exact, by gradients compiled into the ONNX graph (default), or by finite differences (--method richardson|secant)')
    .argument('<model>', 'ONNX model file')
    .option('--sites <list>', `site tensors, comma-separated (the option may be repeated), or ${ALL_ACTIVATIONS}`, siteList)
    .option('--site <tensor>', 'the same as --sites', siteList)
    .option('--out <file.arrow>', 'write the sensitivity table here (required unless --partial; an existing file only with --force)')
    .option('--force', 'replace an existing --out file')
    .option('--stimuli <source>', 'class-folder of images, a path,label CSV, or a float32 .npy [N,C,H,W] (optional with --from)')
    .option('--labels <csv>', 'labels for .npy stimuli: a CSV with one "label" column, row order')
    .option('--from <baseline>', 'baseline snapshot: feed the part downstream of the site from its recorded tensors')
    .option('--readout <output[:category|index]>', 'readout tensor, optionally one unit (default: the first graph output, every unit)')
    .option(READOUT_MAP_FLAGS, `${READOUT_MAP_HELP}; gradients are of each category's log-sum-exp (Σ softmax-within-category · ∂unit), appended to the graph, so every --method sees it`)
    .option('--kind <kind>', 'gain (multiplicative, at g = 1) or offset (additive, at b = 0)', 'gain')
    .option('--step <h>', `finite-difference step h > 0, --method richardson|secant only (Richardson also runs at h/2; default ${DEFAULT_STEP} for --kind gain, ${DEFAULT_OFFSET_STEP} for offset)`)
    .option('--method <method>', 'exact: reverse-mode gradients of the downstream part, one forward and backward run per stimulus and category, all channels at once; richardson: (4·D(h/2) − D(h))/3 from central differences D at h and h/2 (4 runs per channel); secant: D(h) alone (2 runs per channel, half the cost)', SENSE_METHODS[0])
    .option('--stimuli-of <category|each>', 'average only over stimuli containing CATEGORY; each: every readout category over the stimuli containing it')
    .option('--per <unit>', 'feature (default: one value per channel or token feature) or head: one value per head of a multi-head site, the sum over its features')
    .option('--rows <n>', 'perturbed (stimulus, channel, sign) rows per downstream run (finite differences)', positiveInteger, DEFAULT_ROWS_PER_RUN)
    .option('--batch <n>', 'stimuli per run of the whole network (without --from); with --method exact also the (stimulus, category) rows per gradient run', positiveInteger, 16)
    .option('--threads <n>', 'runtime threads (0: let the runtime choose)', nonNegativeInteger, 0)
    .option('--run-memory <MB>', 'MB of tensors one downstream (or gradient) run may hold (default 512): fewer rows per run where they would exceed it', positiveInteger)
    .option('--input-shape <NxCxHxW>', 'input shape for models with dynamic spatial axes')
    .option('--mean <a,b,c>', 'per-channel mean after scaling to [0,1] (default: model sidecar, else 0)')
    .option('--std <a,b,c>', 'per-channel std after scaling to [0,1] (default: model sidecar, else 1)')
    .option('--bgr', 'feed channels in BGR order')
    .option('--json', 'print JSON instead of a table')
    .option('--shard <K/N>', 'with --partial: measure only shard K of N of the stimuli')
    .option('--partial <file.json>', 'write mergeable partial statistics (readout sums) instead of the table; combine with `sonde merge … --out S.arrow`')
    .action(async (modelPath: string, opts: SenseCliOptions) => {
      const io = cliIo();
      if (opts.shard !== undefined && opts.partial === undefined) throw new UsageError('E_PARTIAL', '--shard needs --partial FILE.json (where the shard\'s statistics go)', { hint: 'merge the files with `sonde merge`' });
      if (opts.partial !== undefined && opts.out !== undefined) throw new UsageError('E_PARTIAL', '--partial writes statistics only; --out applies when the parts are merged');
      if (opts.partial === undefined && opts.out === undefined) throw new UsageError('E_USAGE', 'sonde sense needs --out FILE.arrow (where the sensitivity table goes), or --partial FILE.json with --shard');
      const sites = [...(opts.sites ?? []), ...(opts.site ?? [])];
      if (sites.length === 0) throw new UsageError('E_SENSE_SITE', `sonde sense needs --sites TENSOR[,TENSOR…] (or --sites ${ALL_ACTIVATIONS})`, { hint: 'list the candidates with `sonde layers MODEL`' });
      if (opts.kind !== 'gain' && opts.kind !== 'offset') throw new UsageError('E_SENSE_KIND', `--kind must be "gain" or "offset", got "${opts.kind}"`);
      if (!(SENSE_METHODS as readonly string[]).includes(opts.method)) throw new UsageError('E_SENSE_METHOD', `--method must be ${SENSE_METHODS.join(' or ')}, got "${opts.method}"`);
      const method = opts.method as SenseMethod;
      const step = opts.step === undefined ? defaultStep(opts.kind) : Number(opts.step);
      if (opts.step !== undefined && (opts.step.trim() === '' || !Number.isFinite(step) || step <= 0)) {
        throw new UsageError('E_SENSE_STEP', `--step ${JSON.stringify(opts.step)} is not a positive number`, { hint: `use a step between 1e-3 and 1e-2 for float32 networks (default ${defaultStep(opts.kind)} for --kind ${opts.kind})` });
      }
      const bar = createProgressBar('sense');
      const overall = acrossSites(bar, sites.includes(ALL_ACTIVATIONS) ? null : sites.length);
      let result;
      try {
        const senseOptions: SenseOptions = {
          model: modelPath,
          site: sites,
          kind: opts.kind,
          step,
          method,
          rowsPerRun: opts.rows,
          batch: opts.batch,
          ...(opts.runMemory ? { runBytes: opts.runMemory * 2 ** 20 } : {}),
          threads: opts.threads,
          ...(opts.out !== undefined ? { out: opts.out } : {}),
          ...(opts.force ? { force: true } : {}),
          ...(opts.stimuli !== undefined ? { stimuli: opts.stimuli } : {}),
          ...(opts.labels !== undefined ? { labels: opts.labels } : {}),
          ...(opts.from !== undefined ? { from: opts.from } : {}),
          ...(opts.readout !== undefined ? { readout: opts.readout } : {}),
          ...(opts.readoutMap !== undefined ? { readoutMap: readoutMapOption(opts.readoutMap) } : {}),
          ...(opts.stimuliOf !== undefined ? { stimuliOf: opts.stimuliOf } : {}),
          ...(opts.per !== undefined ? { per: perUnit(opts.per) } : {}),
          ...(opts.inputShape ? { inputShape: parseShape(opts.inputShape) } : {}),
          ...(opts.mean ? { mean: parseChannelList(opts.mean, 0, '--mean') } : {}),
          ...(opts.std ? { std: parseChannelList(opts.std, 0, '--std') } : {}),
          ...(opts.bgr ? { bgr: true } : {}),
          onProgress: (p: { site: string; rowsDone: number; rowsTotal: number }) => overall.update(p),
        };
        if (opts.partial !== undefined) {
          const shard = opts.shard !== undefined ? parseShard(opts.shard) : { index: 1, count: 1 };
          const partial = await sensePartial(senseOptions, shard);
          bar.stop();
          const written = writePartial(opts.partial, partial);
          io.stdout(`wrote partial sensitivity statistics of shard ${shard.index}/${shard.count} (stimuli ${partial.shard.stimuli[0]}..${partial.shard.stimuli[1]}) to ${opts.partial} (${written.bytes} bytes)\n`);
          return;
        }
        result = await senseSites(senseOptions);
      } finally {
        bar.stop();
      }
      for (const warning of result.warnings) io.stderr(`sonde: warning: ${warning}\n`);
      if (opts.json) {
        const sites = result.sites.map(({ sensitivity: _s, fdError: _e, extrapolationShift: _x, count, ...rest }) => ({ ...rest, count: Array.from(count) }));
        io.stdout(`${JSON.stringify({ readout: result.readout, source: result.source, file: result.file, sites }, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
        return;
      }
      const indicator = method === 'exact' ? 'step indicator' : method === 'richardson' ? 'worst h vs h/2 shift' : 'worst fd_error';
      const table = new Table({ head: ['site', 'channels / features', 'categories', 'stimuli', 'max |s|', indicator, 'rows', 'downstream share', 'fwd-pass eq./channel', 'seconds'], style: { head: [], border: [], compact: true } });
      for (const s of result.sites) {
        let largest = 0;
        for (let i = 0; i < s.sensitivity.length; i++) largest = Math.max(largest, Math.abs(s.sensitivity[i]!));
        table.push([s.layer, `${s.channels} ${s.unit === 'feature' ? 'features' : s.unit === 'head' ? 'heads' : 'channels'}`, s.categories.length, s.stimuliUsed, largest.toPrecision(3), method === 'exact' ? '—' : `${(100 * s.worstErrorRatio).toPrecision(2)}%`, s.rows, s.downstreamShare.toFixed(3), s.forwardEquivalentsPerChannel.toFixed(3), s.wallSeconds.toFixed(2)]);
      }
      const mapTagText = result.metadata[READOUT_MAP_KEY];
      const mapText = mapTagText !== undefined ? ` of ${result.metadata['sonde.readout']} grouped by readout map ${(JSON.parse(mapTagText) as { name: string }).name}` : '';
      io.stdout(`${opts.kind} sensitivities of ${mapText ? `${result.readout.categories.length} categories${mapText}, each the log-sum-exp of its units` : `${result.readout.tensor} (${result.readout.categories.length === 1 ? result.readout.categories[0] : `${result.readout.categories.length} units`})`}, ${method === 'exact' ? 'exact gradients (reverse mode, in the ONNX graph)' : method === 'richardson' ? `Richardson from steps ${step} and ${step / 2}` : `secant, step ${step}`}, boundary tensors from ${result.source === 'baseline' ? `baseline ${opts.from}` : 'runs of the whole network'} → ${displayPath(opts.out!)}\n`);
      io.stdout(`${table.toString()}\n`);
      const values = method === 'exact'
        ? 'values are Σ over the site\'s positions of (∂y/∂a)·a (gain) or ∂y/∂a (offset), averaged over the stimuli; no step (at a ReLU kink the derivative is PyTorch\'s: 0 at 0)'
        : method === 'richardson'
        ? 'values are (4·D(h/2) − D(h))/3 with D(h) = (y(+h) − y(−h))/2h; the shift |D(h/2) − D(h)|/3 is how far extrapolation moved the h/2 secant'
        : 'values are central secants D(h) = (y(+h) − y(−h))/2h; fd_error is the curvature within ±h, |D₊ − D₋|/2, not an error bound';
      const indicatorNote = method === 'exact' ? '' : `; worst is relative to the category's largest |s| (warning above ${(100 * DEFAULT_WARN_RATIO).toFixed(0)}%)`;
      const perHead = result.sites.some((b) => b.unit === 'head') ? '; per head: the sum over the head\'s features (the derivative for one gain shared by the head)' : '';
      io.stdout(`${values}${indicatorNote}${perHead}; forward-pass equivalents from Conv/Gemm/MatMul multiply-adds${method === 'exact' ? ' (a backward pass counted as two forward passes)' : ''}\n`);
    });
}

/**
 * One bar over all sites: rows done so far at every site, of a total that adds the finished sites' rows, the
 * current site's and (when the site count is known) as many again for each site still to come; the
 * detail names the site and its place ("site 2/3").
 */
export function acrossSites(bar: { update(done: number, total: number, detail?: string): void }, siteCount: number | null): { update(p: { site: string; rowsDone: number; rowsTotal: number }): void } {
  let current = '';
  let index = 0;
  let finished = 0;
  let lastTotal = 0;
  return {
    update(p) {
      if (p.site !== current) {
        if (current !== '') {
          finished += lastTotal;
          index++;
        }
        current = p.site;
      }
      lastTotal = p.rowsTotal;
      const ahead = siteCount === null ? 0 : Math.max(0, siteCount - index - 1) * p.rowsTotal;
      bar.update(finished + Math.min(p.rowsDone, p.rowsTotal), finished + p.rowsTotal + ahead, `${p.site} (site ${index + 1}${siteCount === null ? '' : `/${siteCount}`})`);
    },
  };
}

/** `--per`: feature (channel) or head. */
function perUnit(text: string): 'feature' | 'head' {
  if (text === 'feature' || text === 'channel') return 'feature';
  if (text === 'head') return 'head';
  throw new UsageError('E_SENSE_PER', `--per must be feature or head, got "${text}"`);
}
