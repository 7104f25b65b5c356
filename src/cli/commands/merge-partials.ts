/**
 * The partial-statistics half of `sonde merge`: reads the files, checks they are one run's shards
 * (src/record/partial-file.ts), combines them by kind (src/compare/partials.ts for diff and tune,
 * src/replay/sense-partial.ts for sense) and prints what the unsharded command prints — the diff report (table or JSON), or
 * for tuning the table file written to --out and its summary.
 */
import { UsageError } from '../../errors.js';
import { nonFiniteFailure } from '../../compare/diff-verdict.js';
import { mergeDiffPartials, mergeTunePartials } from '../../compare/partials.js';
import { orderShards, readPartial } from '../../record/partial-file.js';
import { mergeSensePartials } from '../../replay/sense-partial.js';
import { assertOutFileWritable } from '../../outputs/output-file.js';
import { displayPath } from '../../record/record-snapshot.js';
import { SELECTIVE_INDEX } from '../../compare/tune.js';
import { renderDiffReport, reportToJson } from '../../report/diff-table.js';
import { cliIo, outputColumns } from '../io.js';

/**
 * Combines partial-statistics files and prints or writes the result.
 * @param parts paths of the files.
 * @param options `out`: the tuning table for tune partials (required there); `force`: replace an existing
 *   `out`; `json`: print JSON.
 * @throws UsageError for unreadable or mismatched parts, or tune partials without `out`.
 */
export async function mergePartialFiles(parts: readonly string[], options: { out?: string; force?: boolean; json: boolean }): Promise<void> {
  const io = cliIo();
  if (options.out !== undefined) assertOutFileWritable(options.out, { force: options.force ?? false, inputs: parts.map((path, i) => ({ option: `part ${i + 1}`, path })) });
  const files = parts.map((p) => readPartial(p));
  if (files[0]!.of !== 'diff' && options.out === undefined) throw new UsageError('E_MERGE', `merging ${files[0]!.of} partials needs --out FILE.arrow (where the ${files[0]!.of === 'tune' ? 'tuning' : 'sensitivity'} table goes)`);
  if (files[0]!.of === 'diff' && options.out !== undefined) throw new UsageError('E_MERGE', 'merging diff partials prints the report; --out applies to snapshots and tuning tables');
  const ordered = orderShards(files, parts);
  const out = options.out !== undefined ? { out: options.out } : {};
  if (files[0]!.of === 'diff') {
    const report = await mergeDiffPartials(ordered);
    io.stdout(options.json ? reportToJson(report) : renderDiffReport(report, { width: outputColumns() }));
    const failure = nonFiniteFailure(report, `merge of ${parts.length} diff partials`);
    if (failure) throw failure;
    return;
  }
  if (files[0]!.of === 'sense') {
    const result = mergeSensePartials(ordered, out);
    for (const warning of result.warnings) io.stderr(`sonde: warning: ${warning}\n`);
    if (options.json) {
      const sites = result.sites.map(({ sensitivity: _s, fdError: _e, extrapolationShift: _x, count, ...rest }) => ({ ...rest, count: Array.from(count) }));
      io.stdout(`${JSON.stringify({ readout: result.readout, source: result.source, file: result.file, sites }, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
    } else io.stdout(`merged ${parts.length} sense partials: ${result.sites.length} sites, ${result.stimuli} stimuli → ${displayPath(options.out!)}\n`);
    return;
  }
  const r = mergeTunePartials(ordered, out);
  const summary = { out: options.out, parts: parts.length, categories: r.categories, counts: r.counts, stimuliUsed: r.stimuliUsed, stimuliSkipped: r.stimuliSkipped, bytes: r.file?.bytes, selectiveIndex: SELECTIVE_INDEX, layers: r.summaries };
  if (options.json) io.stdout(`${JSON.stringify(summary, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
  else {
    const counts = Object.entries(r.counts).map(([c, n]) => `${c} ${n}`).join(', ');
    io.stdout(`merged ${parts.length} tune partials: ${r.summaries.length} layers, ${r.categories.length} categories (stimuli per category: ${counts}) → ${displayPath(options.out!)}\n`);
  }
}
