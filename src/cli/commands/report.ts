/**
 * `sonde report INPUT... --out report.html`: one self-contained HTML page (inline SVG charts, inline
 * styles, no script, no network) from diff, sweep and tune JSON results. See `writeHtmlReport`.
 */
import type { Command } from 'commander';
import { displayPath } from '../../record/record-snapshot.js';
import { writeHtmlReport } from '../../report/html/html-report.js';
import { cliIo } from '../io.js';

interface ReportCliOptions {
  out: string;
  title?: string;
  force?: boolean;
}

/** Registers `sonde report`. */
export function registerReport(program: Command): void {
  program
    .command('report')
    .description('write one self-contained HTML report (inline SVG charts, no script, no network) from diff, sweep and tune JSON results')
    .argument('<inputs...>', 'JSON files: sonde diff --json (also with --vs), sweep.json, tune --json (also with --against)')
    .requiredOption('--out <file.html>', 'the HTML file to write (an existing file only with --force)')
    .option('--force', 'replace an existing --out file')
    .option('--title <text>', 'page title', 'Sonde report')
    .action(async (inputs: string[], opts: ReportCliOptions, command: Command) => {
      const io = cliIo();
      const result = await writeHtmlReport({ inputs, out: opts.out, ...(opts.force ? { force: true } : {}), ...(opts.title !== undefined ? { title: opts.title } : {}) });
      const kinds = result.inputs.map((i) => i.kind).join(', ');
      io.stdout(`wrote ${displayPath(result.path)} (${(result.bytes / 1024).toFixed(0)} KiB): ${result.charts} chart${result.charts === 1 ? '' : 's'}, ${result.sections.length} section${result.sections.length === 1 ? '' : 's'}, from ${result.inputs.length} input${result.inputs.length === 1 ? '' : 's'} (${kinds})\n`);
      const verbose = command.optsWithGlobals<{ verbose?: boolean }>().verbose === true;
      if (verbose) for (const warning of result.warnings) io.stderr(`sonde: chart warning: ${warning}\n`);
    });
}
