/**
 * `sonde tune SOURCE`: the tuning table of a labelled snapshot (SOURCE a snapshot folder, with --out),
 * or an existing tuning table (SOURCE an .arrow file); with --against, how tuning agrees with a
 * sensitivity table, layer by layer.
 */
import { existsSync, statSync } from 'node:fs';
import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { sparkline } from '../../analysis/sparkline.js';
import { compareTables } from '../../compare/compare-tables.js';
import { displayPath } from '../../record/record-snapshot.js';
import { SELECTIVE_INDEX, summariseLayer, tuneSnapshot, type LayerTuningSummary } from '../../compare/tune.js';
import { readSensitivityTable, readTuningTable, tableReadoutMap, type TuningTableBlock } from '../../snapshot/tables.js';
import { assertSameReadoutMap } from '../../compare/category-readout.js';
import { mapTag, type ReadoutMapTag } from '../../graph/category-map.js';
import { cliIo, outputColumns } from '../io.js';
import { renderAgreement, renderTuningSummaries } from '../../report/tune-table.js';
import { wrapText } from '../../report/terminal-table.js';
import { tunePartial } from '../../compare/partials.js';
import { writePartial } from '../../record/partial-file.js';
import { parseShard } from '../../record/shard.js';
import { READOUT_MAP_FLAGS, READOUT_MAP_HELP, readoutMapOption } from '../readout-map-option.js';

interface TuneCliOptions {
  out?: string;
  layers?: string;
  singleLabel?: boolean;
  against?: string;
  json?: boolean;
  shard?: string;
  partial?: string;
  force?: boolean;
  readoutMap?: string;
}


/** Registers `sonde tune`. */
export function registerTune(program: Command): void {
  program
    .command('tune')
    .description('per layer, channel and category: mean response, standard error, count and tuning value (z-score across categories) of a labelled snapshot')
    .argument('<source>', 'a labelled baseline snapshot folder, or a tuning table (.arrow) made earlier')
    .option('--out <file.arrow>', 'write the tuning table here (needed when SOURCE is a snapshot; an existing file only with --force)')
    .option('--force', 'replace an existing --out file')
    .option('--layers <selector>', 'layers to tune: all | globs | names joined by + (default: every layer with a channel axis)')
    .option('--single-label', 'use only stimuli with exactly one label (default: multi-label stimuli count for each label)')
    .option('--against <sens.arrow>', 'also correlate tuning with a sensitivity table (Pearson and Spearman across channels, per layer)')
    .option(READOUT_MAP_FLAGS, `${READOUT_MAP_HELP}; tune tunes for the map's categories and records the map, so the table pairs with sensitivity tables made under it`)
    .option('--json', 'print JSON instead of tables')
    .option('--shard <K/N>', 'with --partial: accumulate only shard K of N of the stimuli')
    .option('--partial <file.json>', 'write mergeable partial statistics (counts, means, sums of squares) instead of the table; combine with `sonde merge … --out T.arrow`')
    .action(async (source: string, opts: TuneCliOptions) => {
      const io = cliIo();
      if (opts.shard !== undefined && opts.partial === undefined) throw new UsageError('E_PARTIAL', '--shard needs --partial FILE.json (where the shard\'s statistics go)', { hint: 'merge the files with `sonde merge`' });
      if (opts.partial !== undefined) {
        if (opts.against !== undefined || opts.out !== undefined) throw new UsageError('E_PARTIAL', '--partial writes statistics only; --out and --against apply when the parts are merged');
        const shard = opts.shard !== undefined ? parseShard(opts.shard) : { index: 1, count: 1 };
        const partial = await tunePartial({ snapshot: source, ...(opts.layers !== undefined ? { layers: opts.layers } : {}), ...(opts.singleLabel ? { singleLabel: true } : {}), ...(opts.readoutMap !== undefined ? { readoutMap: readoutMapOption(opts.readoutMap) } : {}) }, shard);
        const written = writePartial(opts.partial, partial);
        io.stdout(`wrote partial tuning statistics of shard ${shard.index}/${shard.count} (stimuli ${partial.shard.stimuli[0]}..${partial.shard.stimuli[1]}) to ${opts.partial} (${written.bytes} bytes)\n`);
        return;
      }
      const isTable = existsSync(source) && statSync(source).isFile();
      let blocks: TuningTableBlock[];
      let summaries: LayerTuningSummary[];
      let header: Record<string, unknown> = {};
      let mapTagOfTuning: ReadoutMapTag | null = null;
      if (isTable) {
        if (opts.readoutMap !== undefined) throw new UsageError('E_USAGE', `${source} is a tuning table; --readout-map applies when tuning a snapshot (the table records the map it was made under)`);
        if (opts.layers !== undefined || opts.singleLabel) throw new UsageError('E_USAGE', `${source} is a tuning table; --layers and --single-label apply when tuning a snapshot`);
        if (opts.against === undefined) throw new UsageError('E_USAGE', `${source} is already a tuning table; pass --against SENS.arrow to compare it, or a snapshot folder to tune`);
        const file = readTuningTable(source);
        blocks = file.blocks;
        mapTagOfTuning = tableReadoutMap(file);
        summaries = blocks.map((b) => summariseLayer(b.layer, b.op ?? '', b.depth ?? -1, { ...b, nonFinite: new Int32Array(b.channels), stimuliUsed: 0, stimuliSkipped: 0 }));
      } else {
        if (opts.out === undefined) throw new UsageError('E_USAGE', 'sonde tune SNAPSHOT needs --out FILE.arrow (where the tuning table goes)');
        const tuneMap = readoutMapOption(opts.readoutMap);
        const result = await tuneSnapshot({ snapshot: source, out: opts.out, ...(opts.force ? { force: true } : {}), ...(opts.layers !== undefined ? { layers: opts.layers } : {}), ...(opts.singleLabel ? { singleLabel: true } : {}), ...(tuneMap ? { readoutMap: tuneMap } : {}) });
        blocks = result.blocks;
        summaries = result.summaries;
        mapTagOfTuning = tuneMap ? mapTag(tuneMap) : null;
        header = { snapshot: source, out: opts.out, categories: result.categories, counts: result.counts, stimuliUsed: result.stimuliUsed, stimuliSkipped: result.stimuliSkipped, bytes: result.file?.bytes };
      }
      const against = opts.against !== undefined ? readSensitivityTable(opts.against) : null;
      if (against) assertSameReadoutMap({ what: isTable ? `tuning table ${source}` : `the tuning of ${source}`, tag: mapTagOfTuning }, { what: `--against ${opts.against}`, tag: tableReadoutMap(against) });
      const comparison = against ? compareTables(blocks, against.blocks) : null;
      if (opts.json) {
        io.stdout(`${JSON.stringify({ ...header, selectiveIndex: SELECTIVE_INDEX, layers: summaries, ...(comparison ? { comparison } : {}) }, jsonNumbers, 2)}\n`);
        return;
      }
      if (!isTable) {
        const counts = Object.entries(header['counts'] as Record<string, number>).map(([c, n]) => `${c} ${n}`).join(', ');
        io.stdout(`${wrapText(`tuned ${summaries.length} layers of ${source} for ${(header['categories'] as string[]).length} categories (stimuli per category: ${counts}; ${String(header['stimuliSkipped'])} stimuli without a category left out) → ${displayPath(opts.out!)}`, outputColumns(), '  ')}\n`);
        io.stdout(`${renderTuningSummaries(summaries, { width: outputColumns() })}\n`);
        io.stdout(`${wrapText(`across depth: selective ${sparkline(summaries.map((s) => s.selectiveFraction), { min: 0, max: 1 })}  mean selectivity ${sparkline(summaries.map((s) => s.meanSelectivity), { min: 0, max: 1 })}  (selective: index ≥ ${SELECTIVE_INDEX.toFixed(2)}, preferred category ≥ 2× the others)`, outputColumns(), '  ')}\n`);
      }
      if (comparison) io.stdout(`${renderAgreement(comparison, displayPath(opts.against!), { width: outputColumns(), units: new Map(summaries.map((s) => [s.layer, s.unit])) })}\n`);
    });
}

/** JSON replacer: NaN/±Infinity become null (JSON has no such numbers). */
function jsonNumbers(_key: string, value: unknown): unknown {
  return typeof value === 'number' && !Number.isFinite(value) ? null : value;
}
