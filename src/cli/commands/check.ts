/**
 * `sonde check SNAPSHOT`: verifies a snapshot against its manifest (checksums, sizes, schema, rows,
 * stimuli, pairing) and lists what is wrong; exit 1 when anything is (see src/snapshot/check.ts).
 */
import type { Command } from 'commander';
import { RuntimeFailure } from '../../errors.js';
import { displayPath } from '../../record/record-snapshot.js';
import { checkSnapshot } from '../../snapshot/check.js';
import { megabytes } from '../options.js';
import { cliIo } from '../io.js';

/** Registers `sonde check`. */
export function registerCheck(program: Command): void {
  program
    .command('check')
    .description('verify a snapshot: manifest, every file\'s size and SHA-256, Arrow schema, rows and index order, stimuli, and the pairing with its baseline')
    .argument('<snapshot>', 'snapshot folder')
    .option('--json', 'print the report as JSON')
    .action(async (folder: string, opts: { json?: boolean }) => {
      const io = cliIo();
      const report = await checkSnapshot(folder);
      if (opts.json) io.stdout(`${JSON.stringify(report, null, 2)}\n`);
      else {
        for (const p of report.problems) io.stdout(`✗ ${p.subject}: ${p.message}\n`);
        for (const note of report.notes) io.stdout(`note: ${note}\n`);
        if (report.ok) {
          io.stdout(`${displayPath(report.folder)} is intact: ${report.checked.layerFiles} layer files (${megabytes(report.checked.bytes)}) and ${report.checked.stimuli} stimuli verified${report.checked.baseline ? ', pairs with its baseline' : ''}\n`);
        }
      }
      if (!report.ok) {
        const first = report.problems[0]!;
        throw new RuntimeFailure('E_CHECK', `snapshot ${folder} has ${report.problems.length} problem${report.problems.length === 1 ? '' : 's'}; first: ${first.subject}: ${first.message}`);
      }
    });
}
