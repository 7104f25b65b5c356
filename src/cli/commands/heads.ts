/**
 * `sonde heads MODEL --from BASE --layer L --out MODEL-heads.onnx`: fits one detector per category on a
 * recorded layer and writes the model with the detectors as its readout (plus the sidecar naming them).
 */
import type { Command } from 'commander';
import { fitReadoutHeads } from '../../compare/fit-heads.js';
import { UsageError } from '../../errors.js';
import { fixed } from '../../format.js';
import { fitTable } from '../../report/terminal-table.js';
import { nonNegativeInteger, positiveInteger } from '../options.js';
import { cliIo, outputColumns } from '../io.js';

interface HeadsCliOptions {
  from: string;
  layer: string;
  out: string;
  categories?: string;
  folds: number;
  cValues?: string;
  balanced?: boolean;
  heldOut: string;
  seed: number;
  output?: string;
  force?: boolean;
  json?: boolean;
}

/** Registers `sonde heads`. */
export function registerHeads(program: Command): void {
  program
    .command('heads')
    .description('fit one detector per category (L2 logistic regression, C by cross-validation) on a recorded layer and write the model with them as its readout')
    .argument('<model>', 'ONNX model file (the baseline\'s)')
    .requiredOption('--from <baseline>', 'labelled baseline snapshot the detectors are fitted on')
    .requiredOption('--layer <name>', 'recorded layer the detectors read (feature maps are averaged over space)')
    .requiredOption('--out <model.onnx>', 'the new model; its sidecar (.json beside it) names the detectors as the readout')
    .option('--categories <list>', 'comma-separated categories (default: every label of the baseline)')
    .option('--folds <k>', 'cross-validation folds (stratified, seeded)', positiveInteger, 5)
    .option('--c-values <list>', 'candidate inverse regularisation strengths C (default 1e-4,1e-3,…,100)')
    .option('--balanced', 'weight the classes by n / (2·n_class)')
    .option('--held-out <fraction>', 'stimuli kept out of fitting and cross-validation, reported separately (0 to use all)', '0.2')
    .option('--seed <n>', 'seed of the held-out split and the folds', nonNegativeInteger, 1)
    .option('--output <name>', 'name of the combined readout output', 'readout_heads')
    .option('--force', 'replace an existing --out model and sidecar')
    .option('--json', 'print the fit summary as JSON')
    .action(async (model: string, opts: HeadsCliOptions) => {
      const io = cliIo();
      const heldOut = Number(opts.heldOut);
      if (opts.heldOut.trim() === '' || !Number.isFinite(heldOut)) throw new UsageError('E_HEADS', `--held-out "${opts.heldOut}" is not a number`, { hint: 'e.g. --held-out 0.2' });
      let Cs: number[] | undefined;
      if (opts.cValues !== undefined) {
        Cs = opts.cValues.split(',').map((s) => Number(s.trim()));
        if (Cs.some((c) => Number.isNaN(c))) throw new UsageError('E_HEADS', `--c-values "${opts.cValues}" must be numbers like 0.01,0.1,1`);
      }
      const result = await fitReadoutHeads({
        model,
        from: opts.from,
        layer: opts.layer,
        out: opts.out,
        folds: opts.folds,
        heldOut,
        seed: opts.seed,
        ...(opts.categories !== undefined ? { categories: opts.categories.split(',').map((c) => c.trim()).filter((c) => c.length > 0) } : {}),
        ...(Cs ? { Cs } : {}),
        ...(opts.balanced ? { balanced: true } : {}),
        ...(opts.output !== undefined ? { output: opts.output } : {}),
        ...(opts.force ? { force: true } : {}),
        onProgress: (done, total, category) => io.stderr(`fitted head ${done}/${total} (${category})\n`),
      });
      if (opts.json) {
        io.stdout(`${JSON.stringify(result, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
        return;
      }
      const rows = result.heads.map((h) => [h.category, String(h.C), fixed(h.crossValidated.auc, 3), fixed(h.crossValidated.accuracy, 3), h.heldOut ? fixed(h.heldOut.auc, 3) : '', h.heldOut ? fixed(h.heldOut.accuracy, 3) : '', `${h.crossValidated.positives}/${h.crossValidated.negatives}`]);
      io.stdout(`${result.heads.length} detectors on "${result.layer}" (${result.channels} channels${result.constantChannels > 0 ? `, ${result.constantChannels} constant and left at weight 0` : ''}), ${result.folds}-fold cross-validation on ${result.fitStimuli} stimuli, ${result.heldOutStimuli} held out${result.balanced ? ', classes balanced' : ''}\n`);
      io.stdout(`${fitTable(['category', 'C', 'CV AUC', 'CV acc.', 'held-out AUC', 'held-out acc.', 'fit +/−'], rows, { width: outputColumns() })}\n`);
      io.stdout(`model: ${result.model} (readout "${result.output}", one output per category); sidecar: ${result.sidecar}; AUC: ROC area, acc.: accuracy at logit 0\nrecord with it as with any model: sonde record ${result.model} --stimuli … --labels … --out base-heads\n`);
    });
}
