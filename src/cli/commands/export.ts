/**
 * `sonde export SNAPSHOT --out DIR`: layers of a snapshot as NumPy `.npy` arrays plus `export.json`
 * (coordinates), for NumPy, xarray, MATLAB and anything else that reads `.npy` (see src/export/).
 */
import type { Command } from 'commander';
import { UsageError } from '../../errors.js';
import { exportSnapshot } from '../../export/export-snapshot.js';
import { displayPath } from '../../record/record-snapshot.js';
import { megabytes } from '../options.js';
import { createProgressBar } from '../progress.js';
import { cliIo } from '../io.js';

interface ExportCliOptions {
  out?: string;
  layers?: string;
  force?: boolean;
  float32?: boolean;
}

/** Registers `sonde export`. */
export function registerExport(program: Command): void {
  program
    .command('export')
    .description('write layers of a snapshot as .npy arrays (float32 or float16 as stored; layers of a modulated snapshot read through its baseline) and export.json with the coordinates')
    .argument('<snapshot>', 'snapshot folder')
    .option('--out <dir>', 'export folder (created; an earlier export there is replaced only with --force)')
    .option('--layers <selector>', 'layers to export: all | names | globs | op:Relu,Conv, joined by + (default: all recorded layers)')
    .option('--force', 'replace a complete export already in --out')
    .option('--float32', 'write float16 layers widened to float32 (exact), for .npy readers without half precision')
    .action(async (snapshot: string, opts: ExportCliOptions) => {
      const io = cliIo();
      if (opts.out === undefined) throw new UsageError('E_USAGE', 'sonde export SNAPSHOT needs --out DIR (where the .npy files go)', { hint: `e.g. sonde export ${snapshot} --out ${snapshot.replace(/\/+$/, '')}-npy` });
      const bar = createProgressBar('export');
      let result;
      try {
        result = await exportSnapshot({
          snapshot,
          out: opts.out,
          ...(opts.layers !== undefined ? { layers: opts.layers } : {}),
          ...(opts.force ? { force: true } : {}),
          ...(opts.float32 ? { float32: true } : {}),
          onProgress: (p) => bar.update(p.layerIndex * p.totalRows + p.rows, p.layers * p.totalRows, `${p.layerIndex + 1}/${p.layers} ${megabytes(p.bytesWritten)}`),
        });
      } finally {
        bar.stop();
      }
      const d = result.description;
      io.stdout(`exported ${d.layers.length} layers × ${d.stimuli.count} stimuli of ${displayPath(d.snapshot.path)} into ${displayPath(result.folder)}: ${megabytes(result.bytesWritten)}${result.fromBaseline > 0 ? `; ${result.fromBaseline} layers read from its baseline ${displayPath(d.snapshot.baseline!)}` : ''}\n`);
    });
}
