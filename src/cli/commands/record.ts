import type { Command } from 'commander';
import { existsSync } from 'node:fs';
import { join } from 'node:path';
import { resolveOutFolder } from '../../outputs/output-folder.js';
import { recordSnapshot, displayPath } from '../../record/record-snapshot.js';
import { recordModulated } from '../../record/record-modulated.js';
import { loadModulationTables } from '../../replay/modulation-tables.js';
import { parseChannelList, parseFit, parseInterpolation, parseNormalise, parseShape, parseSize } from '../../stimuli/preprocess.js';
import { UsageError } from '../../errors.js';
import { finiteNumber, megabytes, nonNegativeInteger, positiveInteger } from '../options.js';
import { parseShard } from '../../record/shard.js';
import { parseCompression } from '../../snapshot/compression.js';
import { parseDiskWriteMode } from '../../disk/write-mode.js';
import { createProgressBar } from '../progress.js';
import { cliIo } from '../io.js';

interface RecordCliOptions {
  stimuli: string;
  out: string;
  labels?: string;
  layers?: string;
  keep: string;
  dtype: string;
  compress?: string;
  batch: number;
  threads: number;
  size?: string;
  mean?: string;
  std?: string;
  bgr?: boolean;
  normalise?: string;
  fit?: string;
  interpolation?: string;
  inputShape?: string;
  force?: boolean;
  modulate?: string;
  from?: string;
  fullRun?: boolean;
  runMemory?: number;
  tuning?: string;
  sensitivity?: string;
  resume?: boolean;
  shard?: string;
  checkpointEvery: number;
  diskWrites?: string;
}

/** `sonde record MODEL --stimuli SRC --out DIR`: record a snapshot. */
export function registerRecord(program: Command): void {
  program
    .command('record')
    .description('run a model over stimuli and record every selected layer into an Arrow snapshot')
    .argument('<model>', 'ONNX model file')
    .requiredOption('--stimuli <source>', 'class-folder of images, a path,label CSV, or a float32 .npy [N,C,H,W]')
    .requiredOption('--out <dir>', 'snapshot folder (a bare name goes under snapshots/)')
    .option('--labels <csv>', 'labels: for .npy a CSV with one "label" column in row order (default: the labels file beside it; none: no labels); for a folder a path,label CSV (default: its labels file; folders: by subfolder)')
    .option('--layers <selector>', 'default | all | op:Relu,Conv | name globs, joined by +', 'default')
    .option('--keep <what>', 'full (activations and channel means) or channels (channel means only)', 'full')
    .option('--dtype <type>', 'activation storage: float32 or float16', 'float32')
    .option('--compress <codec>', 'compress the layer files (Arrow IPC buffer compression): zstd, lz4 or none (default zstd; with --from: the baseline\'s)')
    .option('--batch <n>', 'stimuli per batch', positiveInteger, 16)
    .option('--threads <n>', 'runtime threads (0: let the runtime choose)', nonNegativeInteger, 0)
    .option('--size <HxW>', 'image size (default: the model input size)')
    .option('--fit <mode>', 'squash (default: stretch to the input size), crop[:S] (shorter side to S, default the input size, then the centre) or letterbox (fit inside, pad with the mean colour)')
    .option('--interpolation <kernel>', 'resizing kernel: nearest, bilinear, bicubic or lanczos3 (default)')
    .option('--normalise <preset>', 'imagenet (ImageNet mean/std), unit ([0,1]) or signed ([-1,1]); instead of --mean/--std')
    .option('--mean <a,b,c>', 'per-channel mean after scaling to [0,1] (default: model sidecar, else 0)')
    .option('--std <a,b,c>', 'per-channel std after scaling to [0,1] (default: model sidecar, else 1)')
    .option('--bgr', 'feed channels in BGR order')
    .option('--input-shape <NxCxHxW>', 'input shape for models with dynamic spatial axes')
    .option('--force', 'replace a complete (or damaged) snapshot already in --out; files Sonde did not write are never deleted')
    .option('--modulate <spec>', 'modulation spec (YAML or JSON) to inject')
    .option('--from <baseline>', 'baseline snapshot to pair with; only the part downstream of the sites is re-run when possible')
    .option('--tuning <file.arrow>', 'tuning table for the tuning kind and lesion top (from `sonde tune`)')
    .option('--sensitivity <file.arrow>', 'sensitivity table for the sensitivity kind (from `sonde sense`)')
    .option('--full-run', 'with --from: run the whole network instead of replaying the downstream part')
    .option('--run-memory <MB>', 'MB of tensors one runtime call may hold (default 512; with --from: of the downstream replay); a batch is split into smaller calls to stay within it', positiveInteger)
    .option('--resume', 'continue an interrupted recording in --out from its last checkpoint (same options); a complete one is left alone')
    .option('--shard <K/N>', 'record only shard K of N of the stimuli (contiguous, balanced; 1-based K), e.g. $SLURM_ARRAY_TASK_ID/8')
    .option('--checkpoint-every <seconds>', 'seconds between resume checkpoints (0: after every batch)', finiteNumber, 2)
    .option('--disk-writes <mode>', 'how layer files reach the disk: auto (default: O_DIRECT on local ext4/XFS/btrfs, the page cache elsewhere), direct or cached (keeps the written bytes in the page cache for an immediate re-read)')
    .action(async (modelPath: string, opts: RecordCliOptions) => {
      const io = cliIo();
      if (opts.keep !== 'full' && opts.keep !== 'channels') throw new UsageError('E_KEEP', `--keep must be "full" or "channels", got "${opts.keep}"`);
      if (opts.dtype !== 'float32' && opts.dtype !== 'float16') throw new UsageError('E_DTYPE', `--dtype must be "float32" or "float16", got "${opts.dtype}"`);
      const bar = createProgressBar('record');
      try {
        if (opts.from && !opts.modulate) throw new UsageError('E_FROM', '--from needs --modulate (a baseline is paired with a modulated run)');
        const common = {
          model: modelPath,
          stimuli: opts.stimuli,
          out: opts.out,
          layers: opts.layers,
          keep: opts.keep,
          dtype: opts.dtype,
          // zstd by default (npm run bench -- compressed-record); a modulated run keeps its baseline's
          // codec, a resumed one the interrupted run's
          ...(opts.compress !== undefined ? { compress: parseCompression(opts.compress) } : opts.from || (opts.resume && existsSync(join(resolveOutFolder(opts.out), 'manifest.json'))) ? {} : { compress: 'zstd' as const }),
          batch: opts.batch,
          threads: opts.threads,
          ...(opts.labels ? { labels: opts.labels } : {}),
          ...(opts.size ? { size: parseSize(opts.size) } : {}),
          ...(opts.mean ? { mean: parseChannelList(opts.mean, 0, '--mean') } : {}),
          ...(opts.std ? { std: parseChannelList(opts.std, 0, '--std') } : {}),
          ...(opts.bgr ? { bgr: true } : {}),
          ...(opts.fit !== undefined ? parseFit(opts.fit) : {}),
          ...(opts.interpolation !== undefined ? { interpolation: parseInterpolation(opts.interpolation) } : {}),
          ...(opts.normalise !== undefined ? { normalise: parseNormalise(opts.normalise) } : {}),
          ...(opts.inputShape ? { inputShape: parseShape(opts.inputShape) } : {}),
          ...(opts.force ? { force: true } : {}),
          ...(opts.resume ? { resume: true } : {}),
          ...(opts.shard !== undefined ? { shard: parseShard(opts.shard) } : {}),
          checkpointSeconds: opts.checkpointEvery,
          ...(opts.diskWrites !== undefined ? { diskWrites: parseDiskWriteMode(opts.diskWrites) } : {}),
          onNotice: (text: string) => io.stderr(`sonde: ${text}\n`),
          onProgress: (p: { done: number; total: number; bytesWritten: number }) => bar.update(p.done, p.total, megabytes(p.bytesWritten)),
        } as const;
        if ((opts.tuning || opts.sensitivity) && !opts.modulate) throw new UsageError('E_TABLES', '--tuning and --sensitivity need --modulate (they feed the tuning, sensitivity and lesion-top kinds)');
        const loaded = opts.tuning || opts.sensitivity ? loadModulationTables({ ...(opts.tuning ? { tuning: opts.tuning } : {}), ...(opts.sensitivity ? { sensitivity: opts.sensitivity } : {}) }) : null;
        const summary = opts.modulate
          ? await recordModulated({ ...common, modulate: opts.modulate, ...(loaded ? { tables: loaded.tables, categories: loaded.categories } : {}), ...(opts.from ? { from: opts.from } : {}), ...(opts.fullRun ? { fullRun: true } : {}), ...(opts.runMemory ? { runBytes: opts.runMemory * 2 ** 20 } : {}) })
          : await recordSnapshot({ ...common, ...(opts.runMemory ? { runBytes: opts.runMemory * 2 ** 20 } : {}) });
        bar.stop();
        if (summary.resumed === 'complete') return;
        io.stdout(
          `recorded ${summary.manifest.shard ? `shard ${summary.manifest.shard.index}/${summary.manifest.shard.count}: ` : ''}${typeof summary.resumed === 'number' && summary.resumed > 0 ? `${summary.stimuli - summary.resumed} more of ` : ''}${summary.stimuli} stimuli × ${summary.layers} layers into ${displayPath(summary.folder)}: ${megabytes(summary.bytesWritten)} in ${summary.wallSeconds.toFixed(2)} s (${summary.stimuliPerSecond.toFixed(1)} stimuli/s)${summary.manifest.run.mode === 'tail' ? '; replayed the downstream part from the baseline' : summary.manifest.run.reason ? `; full run: ${summary.manifest.run.reason}` : ''}\n`,
        );
      } finally {
        bar.stop();
      }
    });
}
