/**
 * `sonde pictures BASE MOD --out pictures.html`: the pictures of one snapshot pair without a full report
 * (example stimuli, feature maps with the window outline, ROC curves, the signature scatter with
 * `--tuning`, the spatial profile of a windowed change). `--json` prints the numbers behind them.
 */
import type { Command } from 'commander';
import { displayPath } from '../../record/record-snapshot.js';
import { writePairPictures } from '../../report/pictures/pictures-page.js';
import { nonNegativeInteger } from '../options.js';
import { cliIo } from '../io.js';

interface PicturesCliOptions {
  out: string;
  tuning?: string;
  target?: string;
  stimulus?: number;
  force?: boolean;
  json?: boolean;
}

/** Registers `sonde pictures`. */
export function registerPictures(program: Command): void {
  program
    .command('pictures')
    .description('draw the pictures of a snapshot pair into one HTML page: example stimuli, feature maps (with the window outline), ROC curves, signature scatter, spatial profile of a windowed change')
    .argument('<base>', 'baseline snapshot folder')
    .argument('<mod>', 'modulated snapshot folder (recorded with --from BASE)')
    .requiredOption('--out <file.html>', 'the HTML file to write (an existing file only with --force)')
    .option('--tuning <table>', 'tuning table (from `sonde tune`) for the signature scatter')
    .option('--target <category>', 'attended category (default: the modulation\'s target)')
    .option('--stimulus <n>', 'stimulus shown in the feature maps (default: the first showing the target)', nonNegativeInteger)
    .option('--force', 'replace an existing --out file')
    .option('--json', 'also print the numbers behind the pictures (ROC points, signature, spatial profile) as JSON')
    .action(async (base: string, mod: string, opts: PicturesCliOptions) => {
      const io = cliIo();
      const result = await writePairPictures({ base, mod, out: opts.out, ...(opts.tuning ? { tuning: opts.tuning } : {}), ...(opts.target ? { target: opts.target } : {}), ...(opts.stimulus !== undefined ? { stimulus: opts.stimulus } : {}), ...(opts.force ? { force: true } : {}) });
      if (opts.json) {
        const { stimuli, featureMaps, ...numbers } = result.data;
        io.stdout(`${JSON.stringify({ ...numbers, featureMaps: featureMaps.map((m) => ({ layer: m.layer, stimulus: m.stimulus, height: m.height, width: m.width })), stimuli: stimuli.map((s) => ({ category: s.category, index: s.index })) }, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
        return;
      }
      io.stdout(`wrote ${displayPath(result.path)} (${(result.bytes / 1024).toFixed(0)} KiB): ${result.kinds.join(', ') || 'no pictures (see the page for why)'}\n`);
    });
}
