/**
 * `sonde merge PARTS... --out DIR`: joins the shard snapshots of one recording into one snapshot (see
 * src/record/merge.ts). PARTS may instead be partial-statistics files (`diff --shard … --partial`,
 * `tune --shard … --partial`), which are combined into the full result (see src/compare/partials.ts (diff, tune) and src/replay/sense-partial.ts).
 */
import { existsSync, statSync } from 'node:fs';
import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { mergeSnapshots } from '../../record/merge.js';
import { displayPath } from '../../record/record-snapshot.js';
import { megabytes } from '../options.js';
import { createProgressBar } from '../progress.js';
import { cliIo } from '../io.js';
import { mergePartialFiles } from './merge-partials.js';

interface MergeCliOptions {
  out?: string;
  baseline?: string;
  force?: boolean;
  json?: boolean;
}

/** Registers `sonde merge`. */
export function registerMerge(program: Command): void {
  program
    .command('merge')
    .description('join shard snapshots (record --shard K/N) into one snapshot, or combine partial statistics (diff/tune --shard … --partial) into the full result')
    .argument('<parts...>', 'shard snapshot folders, or partial-statistics .json files')
    .option('--out <dir|file>', 'merged snapshot folder; for tune partials the tuning table (.arrow)')
    .option('--baseline <snapshot>', 'modulated shards: the merged baseline the result pairs with (layers equal to it are referenced, not copied)')
    .option('--force', 'replace a complete snapshot (or, for partials, the table file) already in --out')
    .option('--json', 'partial statistics: print the merged result as JSON')
    .action(async (parts: string[], opts: MergeCliOptions) => {
      const io = cliIo();
      const kinds = parts.map((p) => (existsSync(p) ? (statSync(p).isDirectory() ? 'folder' : 'file') : 'missing'));
      const missing = parts.findIndex((_, i) => kinds[i] === 'missing');
      if (missing >= 0) throw new UsageError('E_MERGE', `merge part ${parts[missing]} does not exist`);
      if (kinds.includes('folder') && kinds.includes('file')) throw new UsageError('E_MERGE', 'merge parts must be all snapshot folders or all partial-statistics files, not a mix');
      if (kinds[0] === 'file') {
        await mergePartialFiles(parts, { ...(opts.out !== undefined ? { out: opts.out } : {}), force: opts.force ?? false, json: opts.json ?? false });
        return;
      }
      if (opts.out === undefined) throw new UsageError('E_MERGE', 'sonde merge SHARDS... needs --out DIR (where the merged snapshot goes)');
      const bar = createProgressBar('merge');
      let summary;
      try {
        summary = await mergeSnapshots({
          parts,
          out: opts.out,
          ...(opts.baseline !== undefined ? { baseline: opts.baseline } : {}),
          ...(opts.force ? { force: true } : {}),
          onNotice: (text) => io.stderr(`sonde: ${text}\n`),
          onLayer: (done, total, name) => bar.update(done, total, name),
        });
      } finally {
        bar.stop();
      }
      io.stdout(`merged ${summary.parts} shards into ${displayPath(summary.folder)}: ${summary.stimuli} stimuli × ${summary.layers} layers, ${megabytes(summary.bytesWritten)}${summary.fromBaseline > 0 ? `; ${summary.fromBaseline} layers referenced from the baseline` : ''}\n`);
    });
}
