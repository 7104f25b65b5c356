/**
 * The demo's terminal summary: the findings as bullets with layers named by short labels (full names
 * once, in a legend line), wrapped to the terminal width, then where the files are, and last the
 * headline — what was found, with the measure, its interval and the reference, written from the
 * size-matched comparison's numbers — and the caveat in one line pointing to the full one.
 */
import { shortLayerLabels } from '../report/layer-labels.js';
import { CAVEAT_LINE, sizeMatchedHeadline } from '../report/headline.js';
import { wrapText } from '../report/terminal-table.js';
import type { DemoResult } from './demo.js';

/** Options of `renderDemoSummary`. */
export interface DemoSummaryOptions {
  /** Terminal columns to fit (default: no limit). */
  width?: number;
  /** Wall time of the run, seconds. */
  seconds: number;
  /** How the report and the output folder are shown (e.g. relative to the working folder). */
  reportPath: string;
  folderPath: string;
}

/** Every tensor name the summary may mention: the diffs' layers, the sites, the agreement's layers. */
function layerNames(result: DemoResult): string[] {
  const names = new Set<string>(result.sites);
  for (const d of result.diffs) for (const l of d.report.layers) names.add(l.name);
  for (const l of result.agreement.layers) names.add(l.layer);
  for (const e of result.comparison.effects) for (const s of e.site.split('+')) names.add(s);
  return [...names];
}

/**
 * Renders the demo's summary (see the module comment).
 * @param result what `runDemo` returned.
 * @param options width, elapsed seconds, and the paths as shown.
 * @returns the text, ending in a newline.
 */
export function renderDemoSummary(result: DemoResult, options: DemoSummaryOptions): string {
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const labels = shortLayerLabels(layerNames(result));
  // longest names first, so a name that ends another is not replaced inside it
  const renamed = [...labels].filter(([name, label]) => name !== label).sort((a, b) => b[0].length - a[0].length);
  const shorten = (text: string): string => renamed.reduce((t, [name, label]) => t.split(name).join(label), text);
  const short = (name: string) => labels.get(name) ?? name;
  const lines: string[] = [];
  lines.push(`Sonde demo — ${result.sites.length} sites, ${result.sweep.cells.length} sweep cells, ${options.seconds.toFixed(1)} s`, '');
  for (const line of result.summary) lines.push(wrapText(`  • ${shorten(line)}`, width, '    '));
  const legend = result.sites.filter((s) => short(s) !== s).map((s) => `${short(s)} = ${s}`);
  if (legend.length > 0) lines.push(wrapText(`  (sites: ${legend.join('; ')})`, width, '    '));
  lines.push('', wrapText(`report: ${options.reportPath}`, width, '  '), wrapText(`snapshots and tables: ${options.folderPath}`, width, '  '), '');
  const headline = sizeMatchedHeadline(result.comparison, short);
  lines.push(wrapText(`Finding: ${headline.sentences.join(' ')}`, width, '  '));
  lines.push(wrapText(`${CAVEAT_LINE} See "What this does not show" in README.md.`, width, '  '));
  return `${lines.join('\n')}\n`;
}
