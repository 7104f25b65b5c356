/**
 * `recordSnapshot`: the stimuli run through the instrumented network batch by batch, every chosen layer
 * written to its Arrow file as it comes, with checkpoints to resume from. One file, although past ~500
 * lines, because its parts share one run's state: the folder it settles (fresh, resumed or complete),
 * the pipelined loop (`runPipelined`: feeds of batch k+1 prepared while the runtime computes batch k,
 * also used by the sweep), the stimulus digests checked on resume, and the non-finite tallies.
 */
import { createHash } from 'node:crypto';
import { existsSync, renameSync, statSync } from 'node:fs';
import { extname, relative } from 'node:path';
import { closestHint, RuntimeFailure, SondeError, UsageError } from '../errors.js';
import { exposureAdditions } from '../graph/instrument.js';
import { float16Additions, halfOutputName, meansOutputName } from '../graph/expose-half.js';
import { encodeForRuntime } from '../graph/weights-by-reference.js';
import { fusionNotice } from '../graph/fusions.js';
import { layoutGeometry } from '../graph/layout.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { selectLayers } from '../graph/select.js';
import { runBytesOption } from '../graph/run-memory.js';
import { readSidecar } from '../graph/sidecar.js';
import { createNetworkSession, type FloatTensor, type StoredTensor } from '../session/network-session.js';
import { channelCount, LayerFileWriter, manifestFields } from '../snapshot/layer-file.js';
import { BackgroundWriteError, BackgroundWriter, DEFAULT_QUEUED_BYTES } from '../snapshot/background-writer.js';
import type { DiskWriteMode } from '../disk/write-mode.js';
import { writeFailure } from '../disk/write-failure.js';
import { parseCompression, recordedCompression, type LayerCompression } from '../snapshot/compression.js';
import { FORMAT_VERSION, writeManifest, type ActivationDtype, type KeepMode, type ManifestLayer, type ShardInfo, type SnapshotManifest } from '../snapshot/manifest.js';
import { STIMULUS_DIGEST_BYTES, stimuliDigest, writeStimuliFile } from '../snapshot/stimuli-file.js';
import { listingDigest, openStimulusSource, type StimulusSource } from '../stimuli/source.js';
import { readNpyHeader } from '../stimuli/npy.js';
import { resolvePreprocessing, type PreprocessingOptions } from './resolve-preprocessing.js';
import { TOOL_VERSION } from '../version.js';
import { describeSkipped, inspectModel, type LayerInfo, type ModelInspection } from './inspect-model.js';
import { assertApartFromInputs, openOutputFolder, resolveOutFolder, slugify, type OpenedOutput } from '../outputs/output-folder.js';
import { nonFiniteNotice, NonFiniteTally, STIMULI_KEY } from './non-finite.js';
import { checkpointSha256, DIGEST_LOG_FILE, DigestLog, removeProgress, writeProgress, type ProgressRecord } from '../snapshot/progress-file.js';
import { shardRange, type ShardSpec } from './shard.js';
import { callRows, runtimeCalls, stimulusBatches, type FeedBatch } from './runtime-calls.js';

/** Progress of a recording, reported after every batch. */
export interface RecordProgress {
  done: number;
  total: number;
  elapsedSeconds: number;
  bytesWritten: number;
}

/** Options of `recordSnapshot`. Only `model`, `stimuli` and `out` are required. */
export interface RecordOptions extends PreprocessingOptions {
  /** Path of the .onnx model (or a model already loaded). */
  model: string | LoadedModel;
  /** Folder of category subfolders, a `path,label` CSV, or a float32 `.npy` [N,C,H,W]. */
  stimuli: string;
  /** For `.npy` stimuli: a CSV with one `label` column, in row order. */
  labels?: string;
  /** Output folder; a bare name goes under `snapshots/`. */
  out: string;
  /** Layer selector (`default`, `all`, `op:Relu,Conv`, globs, names joined by `+`). Default `default`. */
  layers?: string;
  /** Exact tensor names to record (instead of `layers`), e.g. the layers of a baseline. */
  layerNames?: readonly string[];
  /** `full` (default) keeps activations and channel means; `channels` only channel means. */
  keep?: KeepMode;
  /** Storage of activations: `float32` (default) or `float16`. */
  dtype?: ActivationDtype;
  /** Arrow IPC buffer compression of the layer files: `none` (default), `lz4` or `zstd` (snapshot/compression.ts). */
  compress?: LayerCompression;
  /** Stimuli per batch (default 16): the unit of checkpoints; runtime calls may take fewer (`runBytes`). */
  batch?: number;
  /**
   * Bytes of tensors one runtime call may hold (default `DEFAULT_RUN_BYTES`, 512 MiB; graph/run-memory.ts):
   * a batch whose inputs, recorded outputs and working set would exceed it runs in calls of fewer stimuli.
   */
  runBytes?: number;
  /** Runtime intra-op threads; 0 (default) lets the runtime choose. */
  threads?: number;
  /** Image size HxW; defaults to the model's input size. */
  size?: [number, number];
  /** Full input shape for models with dynamic spatial axes. */
  inputShape?: number[];
  /**
   * Run the network in a worker thread (default true), so that reading and writing overlap the
   * computation; false runs it on the calling thread (the benchmark measures the difference).
   */
  sessionInWorker?: boolean;
  /**
   * Write and hash the layer files on a thread of their own (default true; src/snapshot/background-writer.ts);
   * false writes them on the calling thread (the benchmark measures the difference).
   */
  writeInBackground?: boolean;
  /**
   * How the background writer's files reach the disk (default `auto`: O_DIRECT on local disk file
   * systems, the page cache elsewhere; disk/write-mode.ts). The bytes are the same either way.
   */
  diskWrites?: DiskWriteMode;
  /**
   * With `dtype: 'float16'` (and `keep: 'full'`): convert in the graph with ONNX Cast nodes (default
   * true; graph/expose-half.ts) rather than in JavaScript after the run (the benchmark compares them).
   */
  float16InGraph?: boolean;
  /**
   * Let the runtime's threads spin while they wait (`NetworkSessionOptions.spinning`). Default false: a
   * recording computes channel means and writes beside the network, and spinning threads would take
   * the cores those need.
   */
  runtimeSpinning?: boolean;
  /** Replace a complete snapshot already in `out`. */
  force?: boolean;
  /**
   * Continue an interrupted recording in `out` from its last checkpoint (the options must describe the
   * same recording); a complete snapshot there is left as it is, a missing one is recorded afresh.
   */
  resume?: boolean;
  /** Record only shard K of N of the stimuli (see `src/record/shard.ts`); indices stay global. */
  shard?: ShardSpec;
  /** Seconds between checkpoints (default 2; 0: after every batch). */
  checkpointSeconds?: number;
  /** Receives one-line notices: a stale lock taken over, where a resume continues. */
  onNotice?: (text: string) => void;
  /** Called after every batch. */
  onProgress?: (progress: RecordProgress) => void;
  /** Internal: extends the run (modulation inputs, graph changes, manifest fields). */
  extension?: RecordExtension;
}

/** Hooks the modulation pipeline uses to extend a plain recording. */
export interface RecordExtension {
  /** Rewrites the model before outputs are exposed (e.g. inserts gain inputs). */
  transformModel?(model: LoadedModel, inspection: ModelInspection): LoadedModel;
  /** Extra feeds for the batch of `rows` stimuli starting at `firstStimulus`. */
  extraFeeds?(firstStimulus: number, rows: number): Record<string, FloatTensor>;
  /** Stored in the manifest's `modulation` field. */
  manifestModulation?: unknown;
  /** Stored in the manifest's `baseline` field. */
  manifestBaseline?: SnapshotManifest['baseline'];
  /** Last check before the manifest is marked complete (e.g. the stimuli digest matches the baseline's). */
  beforeComplete?(manifest: SnapshotManifest): void;
}

/** What `recordSnapshot` returns. */
export interface RecordSummary {
  folder: string;
  /** With `resume`: stimuli that were already recorded at the checkpoint, or `complete` when nothing was left to do. */
  resumed?: number | 'complete';
  manifest: SnapshotManifest;
  stimuli: number;
  layers: number;
  bytesWritten: number;
  wallSeconds: number;
  /** Seconds from the start until the runtime session was ready for the first batch (model loading, inspection, session creation). */
  setupSeconds: number;
  stimuliPerSecond: number;
}

/**
 * Records a snapshot: runs the model over every stimulus with the selected tensors exposed, and writes
 * one Arrow file per layer, `stimuli.arrow` and `manifest.json` (marked complete last). Reading the
 * next batch and writing the previous one overlap the runtime's computation of the current one;
 * memory holds about two batches.
 * @throws UsageError for bad options or inputs (before anything is marked complete); RuntimeFailure
 *   for runtime or write failures (the manifest then says `complete: false` with the error).
 */
export async function recordSnapshot(options: RecordOptions): Promise<RecordSummary> {
  const started = performance.now();
  const model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
  // before anything is written: the output must be none of the inputs (nor contain or lie inside one)
  assertApartFromInputs(resolveOutFolder(options.out), '--out', [{ option: 'MODEL', path: model.path }, { option: '--stimuli', path: options.stimuli }, { option: '--labels', path: options.labels }]);
  const sidecar = readSidecar(model.path);
  const keep = options.keep ?? 'full';
  const dtype = options.dtype ?? 'float32';
  if (keep !== 'full' && keep !== 'channels') throw new UsageError('E_KEEP', `--keep must be "full" or "channels", got "${String(keep)}"`);
  if (dtype !== 'float32' && dtype !== 'float16') throw new UsageError('E_DTYPE', `--dtype must be "float32" or "float16", got "${String(dtype)}"`);
  const compression = parseCompression(options.compress ?? (options.resume ? recordedCompression(resolveOutFolder(options.out)) : 'none'));
  const requestedBatch = options.batch ?? 16;
  if (!Number.isInteger(requestedBatch) || requestedBatch <= 0) throw new UsageError('E_BATCH', `--batch must be a positive integer, got ${requestedBatch}`);
  runBytesOption(options.runBytes);
  const inputShape = chooseInputShape(model, options);
  const declared = model.input.dims;
  const inspection = await inspectModel(model, inputShape ? { inputShape } : {});
  const selected = options.layerNames ? pickLayers(inspection.layers, options.layerNames, model.fileName) : selectLayers(inspection.layers, options.layers);
  // a narrower choice than `all` (which records everything knowingly) that holds pre-activations: say what they cost
  if (!options.layerNames && options.layers !== undefined && !/^\s*(default|all)\s*$/.test(options.layers)) {
    const notice = fusionNotice(model, selected.map((l) => l.name));
    if (notice) options.onNotice?.(`--layers ${options.layers}: ${notice}`);
  }
  if (!options.layerNames && /(^|[\s+])all($|[\s+])/.test(options.layers ?? '')) {
    const skipped = describeSkipped(inspection, typeof options.model === 'string' ? options.model : model.path);
    if (skipped) options.onNotice?.(`--layers all: ${skipped}`);
  }
  const [, channels, height, width] = inspection.input.shape.length === 4 ? inspection.input.shape : [0, 0, 0, 0];
  if (inspection.input.shape.length !== 4) {
    throw new UsageError('E_INPUT_SHAPE', `input "${model.input.name}" has shape [${inspection.input.shape.join(', ')}]; Sonde feeds NCHW image batches`);
  }
  if (options.size && (options.size[0] !== height || options.size[1] !== width)) {
    throw new UsageError('E_STIMULI_SHAPE', `--size ${options.size.join('x')} does not match the model input ${height}x${width}`);
  }
  const preprocessing = resolvePreprocessing(options, sidecar?.preprocessing, channels!, [height!, width!]);
  for (const [key, list] of [['--mean', preprocessing.mean], ['--std', preprocessing.std]] as const) {
    if (list.length !== channels) throw new UsageError('E_PREPROCESS', `${key} has ${list.length} values but the model input has ${channels} channels`);
  }
  if (preprocessing.std.some((s) => s === 0)) throw new UsageError('E_PREPROCESS', '--std values must not be 0');
  const source = openStimulusSource(options.stimuli, { preprocessing, channels: channels!, ...(options.labels ? { labelsFile: options.labels } : {}), ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
  if (source.kind === 'npy') {
    const imageOnly = (['fit', 'shorterSide', 'interpolation', 'normalise', 'mean', 'std', 'bgr'] as const).filter((key) => options[key] !== undefined);
    if (imageOnly.length > 0) options.onNotice?.(`--stimuli ${options.stimuli} is an array and is fed as it is; ${imageOnly.join(', ')} apply to images only`);
  }
  const fixedBatch = typeof declared[0] === 'number' ? declared[0] : null;
  const batch = fixedBatch ?? requestedBatch;
  const range = options.shard ? shardRange(options.shard.index, options.shard.count, source.count) : { start: 0, end: source.count };
  const rowsTotal = range.end - range.start;
  const shard: ShardInfo | null = options.shard ? { index: options.shard.index, count: options.shard.count, stimuli: [range.start, range.end - 1], total: source.count } : null;
  const checkpointSeconds = options.checkpointSeconds ?? 2;
  if (!(checkpointSeconds >= 0) || !Number.isFinite(checkpointSeconds)) throw new UsageError('E_CHECKPOINT', `--checkpoint-every must be a number of seconds ≥ 0, got ${checkpointSeconds}`);

  const folder = resolveOutFolder(options.out);
  const opened = openOutputFolder(folder, { force: options.force ?? false, resume: options.resume ?? false, ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
  try {
    const transformed = options.extension?.transformModel ? options.extension.transformModel(model, inspection) : model;
    const layerEntries: ManifestLayer[] = selected.map((layer) => ({
      name: layer.name,
      op: layer.op,
      depth: layer.depth,
      weightDepth: layer.weightDepth,
      shape: layer.shape,
      layout: layer.layout,
      dtype,
      keep,
      ...(compression !== 'none' ? { compression } : {}),
      file: `layers/${String(layer.depth).padStart(3, '0')}-${slugify(layer.name)}.arrow`,
    }));
    const manifest: SnapshotManifest = {
      format: FORMAT_VERSION,
      tool: { name: 'sonde', version: TOOL_VERSION },
      model: { file: model.fileName, sha256: model.sha256, input: { name: model.input.name, shape: inspection.input.shape.slice(1) } },
      stimuli: { source: source.description, count: rowsTotal, digest: '', listingDigest: listingDigest(source), categories: [...new Set(source.labels.flat())].sort() },
      preprocessing: source.kind === 'npy' ? null : preprocessing,
      modulation: options.extension?.manifestModulation ?? null,
      readout: sidecar?.outputs ? { name: sidecar.outputs.name, kinds: sidecar.outputs.kinds, ...(sidecar.outputs.threshold !== undefined ? { threshold: sidecar.outputs.threshold } : {}) } : null,
      baseline: options.extension?.manifestBaseline ?? null,
      run: { mode: 'full', batch, threads: options.threads ?? 0 },
      created: new Date().toISOString(),
      layers: layerEntries,
      ...(shard ? { shard } : {}),
      complete: false,
    };
    const settled = settleOutputFolder(opened, manifest, folder, options.onNotice);
    if ('done' in settled) return settled.done;
    const checkpoint = settled.checkpoint;
    if (opened.resume) {
      if (checkpoint && checkpoint.stimuli > rowsTotal) throw new RuntimeFailure('E_RESUME', `${folder}/progress.json says ${checkpoint.stimuli} stimuli are done, but the recording has ${rowsTotal}`, { hint: 'record again without --resume' });
      if (checkpoint) options.onNotice?.(`resuming ${displayPath(folder)} after ${checkpoint.stimuli} of ${rowsTotal} stimuli (${checkpoint.batches} batches)`);
      else {
        options.onNotice?.(`${displayPath(folder)} reached no checkpoint; recording it from the start`);
        removeProgress(folder);
      }
    }
    writeManifest(folder, manifest);
    const elementsByName = new Map(inspection.layers.map((l) => [l.name, l.elements]));
    return await recordInto(folder, manifest, checkpoint, { options, elements: (name) => elementsByName.get(name), model: transformed, ownsModel: typeof options.model === 'string' && transformed === model, source, selected, batch, fixedBatch, range, channels: channels!, height: height!, width: width!, started, checkpointSeconds, keep, dtype });
  } finally {
    opened.lock.release();
  }
}

interface RecordRun {
  options: RecordOptions;
  /** Per-stimulus element count of a tensor of the model (undefined when unknown, e.g. weights). */
  elements: (tensor: string) => number | undefined;
  model: LoadedModel;
  ownsModel: boolean; // `model` is this recording's alone (loaded here, untransformed): its weights are dropped once the runtime has them (graph/weights-by-reference.ts, release)
  source: StimulusSource;
  selected: LayerInfo[];
  batch: number;
  fixedBatch: number | null;
  range: { start: number; end: number };
  channels: number;
  height: number;
  width: number;
  started: number;
  checkpointSeconds: number;
  keep: KeepMode;
  dtype: ActivationDtype;
}

/** The recording proper, into a locked folder whose manifest (complete: false) is written. */
async function recordInto(folder: string, manifest: SnapshotManifest, checkpoint: ProgressRecord | null, run: RecordRun): Promise<RecordSummary> {
  const { options, source, selected, batch, fixedBatch, range } = run;
  const layerEntries = manifest.layers;
  const { keep, dtype } = run;
  const rowsTotal = range.end - range.start;
  const doneBatches = checkpoint?.batches ?? 0;
  const doneRows = checkpoint?.stimuli ?? 0;
  if (doneRows !== Math.min(rowsTotal, doneBatches * batch)) throw new RuntimeFailure('E_RESUME', `${folder}/progress.json: ${doneBatches} batches of ${batch} cannot hold ${doneRows} stimuli`, { hint: 'record again without --resume' });
  const writers: LayerFileWriter[] = [];
  let digests: DigestLog | null = null;
  let lastCheckpoint = performance.now();
  // layer bytes are written and hashed on a thread of their own, beside the network's
  const background = options.writeInBackground === false ? undefined : new BackgroundWriter(DEFAULT_QUEUED_BYTES, options.diskWrites ?? 'auto');
  try {
    // resuming: the digest log and the stimuli first (nothing of the layer files is touched before the
    // stimuli are known to be the same), then each partial file against its checkpoint hash
    digests = new DigestLog(folder, rowsTotal, doneRows, checkpoint ? checkpointSha256(folder, checkpoint, DIGEST_LOG_FILE) : undefined);
    const log = digests;
    if (doneRows > 0) await assertSameStimuli(run, log.digests, doneRows, folder);
    selected.forEach((layer, i) => {
      const file = layerEntries[i]!.file;
      const path = `${folder}/${file}`;
      const layout = { name: layer.name, shape: layer.shape, dtype, keep, layout: layer.layout, compression: (layerEntries[i]!.compression ?? 'none') as LayerCompression };
      if (checkpoint) {
        const at = checkpoint.files[file];
        if (at === undefined) throw new RuntimeFailure('E_RESUME', `${folder}/progress.json has no checkpoint for ${file}`, { hint: 'record again without --resume' });
        const resumeSha256 = checkpointSha256(folder, checkpoint, file);
        // killed after the file was finished and renamed, before the manifest was: take it back
        if (!existsSync(`${path}.partial`) && existsSync(path)) renameSync(path, `${path}.partial`);
        writers.push(new LayerFileWriter(path, layout, { resumeAt: at, resumeSha256, ...(background ? { background, rowsPerWrite: batch } : {}) }));
        if (writers[i]!.rows !== doneRows) throw new RuntimeFailure('E_RESUME', `${path}.partial holds ${writers[i]!.rows} rows at the checkpoint, expected ${doneRows}`, { hint: 'record again without --resume' });
      } else writers.push(new LayerFileWriter(path, layout, background ? { background, rowsPerWrite: batch } : {}));
    });
    // NaN/±Inf counts: per layer as written, per stimulus row as fed (the feeds run one batch ahead)
    const tally = checkpoint && !checkpoint.nonFinite ? null : new NonFiniteTally(checkpoint?.nonFinite);
    const fedNonFinite = new Uint32Array(rowsTotal);
    // a checkpoint's progress record is written only if no later checkpoint was written before it
    let generation = 0;
    let inFlight: Promise<void> | null = null;
    let checkpointError: unknown = null;
    const takeCheckpoint = (batches: number, stimuli: number) => {
      generation += 1;
      const files: Record<string, number> = {};
      const sha256: Record<string, string> = {};
      background?.syncAll(); // all layer files at once; each writer's own fsync below then finds them clean
      writers.forEach((writer, i) => {
        files[layerEntries[i]!.file] = writer.checkpoint();
        sha256[layerEntries[i]!.file] = writer.checkpointSha256();
      });
      log.sync();
      sha256[DIGEST_LOG_FILE] = log.sha256();
      writeProgress(folder, { format: 1, batches, stimuli, files, sha256, ...(tally ? { nonFinite: fedTally(tally, fedNonFinite, doneRows, stimuli).toRecord() } : {}) });
      lastCheckpoint = performance.now();
    };
    /**
     * A checkpoint that does not stop the pipeline: the writer thread takes the files' hashes at this
     * point and fsyncs them while recording goes on; the progress record follows once they are on disk.
     */
    const takeCheckpointBeside = (batches: number, stimuli: number) => {
      // after every batch (--checkpoint-every 0) each checkpoint is complete before the next batch is written
      if (!background || run.checkpointSeconds === 0) return takeCheckpoint(batches, stimuli);
      if (inFlight) return; // one at a time; the next falls due soon enough
      const mine = ++generation;
      log.sync();
      const logSha256 = log.sha256();
      const nonFinite = tally ? fedTally(tally, fedNonFinite, doneRows, stimuli).toRecord() : null;
      lastCheckpoint = performance.now();
      inFlight = background
        .checkpointAll()
        .then((result) => {
          if (mine !== generation) return;
          const files: Record<string, number> = {};
          const sha256: Record<string, string> = {};
          for (const entry of layerEntries) {
            const at = result.get(`${folder}/${entry.file}.partial`);
            if (!at) throw new RuntimeFailure('E_WRITE', `${folder}/${entry.file}.partial: no checkpoint from the writer thread`);
            files[entry.file] = at.bytes;
            sha256[entry.file] = at.sha256;
          }
          sha256[DIGEST_LOG_FILE] = logSha256;
          writeProgress(folder, { format: 1, batches, stimuli, files, sha256, ...(nonFinite ? { nonFinite } : {}) });
        })
        .catch((error: unknown) => {
          checkpointError ??= error instanceof BackgroundWriteError ? writeFailure(error.path ?? folder, error) : error;
        })
        .finally(() => {
          inFlight = null;
        });
    };
    if (!checkpoint) takeCheckpoint(0, 0);
    // float16 activations: Cast nodes in the graph convert them, so the runtime hands over half the bytes
    const castInGraph = dtype === 'float16' && keep === 'full' && options.float16InGraph !== false;
    const names = selected.map((l) => l.name);
    // and their channel means too, in float32 before the rounding (the stored means stay those of the float32 values)
    const fetch = castInGraph ? [...names.map(halfOutputName), ...names.map(meansOutputName)] : names;
    const geometries = selected.map((l) => layoutGeometry(l.shape, l.layout));
    const additions = castInGraph ? float16Additions(run.model, names, geometries) : exposureAdditions(run.model, names);
    // large weights by reference into the model's file, which the runtime reads itself (graph/weights-by-reference.ts)
    const session = await createNetworkSession(encodeForRuntime(run.model, additions, { release: run.ownsModel }), { threads: options.threads ?? 0, label: run.model.fileName, inWorker: options.sessionInWorker ?? true, spinning: options.runtimeSpinning ?? false, giveBytes: true });
    const setupSeconds = (performance.now() - run.started) / 1000;
    let bytesWritten = 0;
    try {
      const calls = runtimeCalls(doneRows, rowsTotal, batch, callRows({ model: run.model, fetched: names, inputElements: run.channels * run.height * run.width, elements: run.elements, batch, fixedBatch, runBytes: options.runBytes }));
      const read = stimulusBatches(source, fixedBatch, range, run.model.input.name, [run.channels, run.height, run.width], log.digests, options.extension?.extraFeeds?.bind(options.extension), fedNonFinite);
      await runPipelined(
        calls.length,
        (k) => read(calls[k]!.first, calls[k]!.rows),
        (feeds) => session.runStored(feeds, fetch),
        async (first, rows, outputs) => {
          // compressed layers: every layer's values compressed side by side on the thread pool first
          await Promise.all(selected.map((_, i) => (outputs[fetch[i]!] ? writers[i]!.precompress(outputs[fetch[i]!]!.data, rows) : undefined)));
          selected.forEach((layer, i) => {
            const tensor = outputs[fetch[i]!];
            if (!tensor) throw new UsageError('E_RUNTIME_OUTPUT', `the runtime returned no value for "${layer.name}"`);
            checkShape(layer, tensor, rows, fixedBatch);
            // the runtime's buffer moves on to the writer thread (not copied); the count comes from the means pass
            const means = castInGraph ? (outputs[meansOutputName(layer.name)]?.data as Float32Array | undefined) : undefined;
            if (castInGraph && !means) throw new UsageError('E_RUNTIME_OUTPUT', `the runtime returned no channel means for "${layer.name}"`);
            const nonFinite = writers[i]!.write(first, rows, tensor.data, true, means);
            tally?.add(layerEntries[i]!.file, nonFinite);
          });
          log.append(first - range.start, rows);
          const done = first + rows - range.start;
          // checkpoints fall on whole batches (a resume counts in batches of --batch), however the runtime calls split them
          const batchEnd = done % batch === 0 || done === rowsTotal;
          if (checkpointError) throw checkpointError;
          if (batchEnd && done === rowsTotal) takeCheckpoint(Math.ceil(done / batch), done);
          else if (batchEnd && (performance.now() - lastCheckpoint) / 1000 >= run.checkpointSeconds) takeCheckpointBeside(Math.ceil(done / batch), done);
          bytesWritten += selected.reduce((sum, l) => sum + rows * ((keep === 'full' ? l.elements * (dtype === 'float16' ? 2 : 4) : 0) + channelsOf(l) * 4), 0);
          options.onProgress?.({ done, total: rowsTotal, elapsedSeconds: (performance.now() - run.started) / 1000, bytesWritten });
        },
      );
    } finally {
      // a checkpoint on its way still writes its progress record (a resume can start there), then none does
      if (inFlight) await inFlight;
      generation += 1;
      await session.close();
    }
    if (checkpointError) throw checkpointError;
    let total = 0;
    background?.syncAll();
    writers.forEach((writer, i) => {
      const result = writer.finish();
      Object.assign(layerEntries[i]!, manifestFields(layerEntries[i]!.file, result));
      total += result.bytes + (result.means?.bytes ?? 0);
    });
    const stimuliFile = writeStimuliFile(`${folder}/stimuli.arrow`, source.ids.slice(range.start, range.end), source.labels.slice(range.start, range.end), { digests: log.digests, firstIndex: range.start });
    total += stimuliFile.bytes;
    manifest.stimuli.table = { sha256: stimuliFile.sha256, bytes: stimuliFile.bytes };
    const wallSeconds = (performance.now() - run.started) / 1000;
    manifest.stimuli.digest = stimuliDigest(log.digests);
    if (tally) {
      const whole = fedTally(tally, fedNonFinite, doneRows, rowsTotal);
      layerEntries.forEach((entry) => (entry.nonFinite = whole.get(entry.file)));
      manifest.stimuli.nonFinite = whole.get(STIMULI_KEY);
    }
    manifest.run.wallSeconds = Math.round(wallSeconds * 1000) / 1000;
    options.extension?.beforeComplete?.(manifest);
    manifest.complete = true;
    delete manifest.error;
    writeManifest(folder, manifest);
    log.close();
    removeProgress(folder);
    const notice = nonFiniteNotice(manifest);
    if (notice) options.onNotice?.(notice);
    return { folder, manifest, ...(options.resume ? { resumed: doneRows } : {}), stimuli: rowsTotal, layers: selected.length, bytesWritten: total, wallSeconds, setupSeconds, stimuliPerSecond: (rowsTotal - doneRows) / wallSeconds };
  } catch (error) {
    // keep the partial files and the last checkpoint: `--resume` continues from there
    for (const writer of writers) writer.suspend();
    digests?.close();
    throw markIncomplete(folder, manifest, error);
  } finally {
    await background?.terminate();
  }
}

/**
 * Records the error in the manifest (which stays `complete: false`) and returns the error to throw: a
 * write failure's message says that the snapshot was left incomplete and how to continue (`rerun`:
 * `--resume` for a recording; merge, which has none, runs again).
 */
export function markIncomplete(folder: string, manifest: SnapshotManifest, error: unknown, rerun = 'run the same command with --resume'): unknown {
  manifest.complete = false;
  manifest.error = error instanceof Error ? error.message.split('\n')[0] : String(error);
  try {
    writeManifest(folder, manifest);
  } catch {
    // the original error matters more
  }
  if (error instanceof SondeError && error.code === 'E_WRITE') {
    return new RuntimeFailure('E_WRITE', `${error.message}; snapshot ${displayPath(folder)} is left marked incomplete`, { hint: `free space or fix the cause, then ${rerun}` });
  }
  return error;
}

/**
 * Throws unless `stored` (an interrupted or finished recording) and `wanted` (what these options would
 * record) describe the same recording: model, stimuli, preprocessing, modulation, baseline, batch size,
 * layers and shard. Creation time, threads and timings may differ.
 * @throws UsageError naming the first field that differs.
 */
/**
 * Reconciles an opened output folder with the manifest about to be written. When the folder already
 * holds this very snapshot complete, the run has nothing to do and its summary is returned (`done`).
 * When it holds an interrupted recording of the same run, that recording's creation time is kept and
 * its last checkpoint returned (null: none was reached).
 * @throws RuntimeFailure (from assertSameRecording) when the folder holds a different recording.
 */
export function settleOutputFolder(opened: OpenedOutput, manifest: SnapshotManifest, folder: string, onNotice: ((line: string) => void) | undefined): { done: RecordSummary } | { checkpoint: ProgressRecord | null } {
  if (opened.complete) {
    assertSameRecording(opened.complete, manifest, folder);
    removeProgress(folder);
    onNotice?.(`${displayPath(folder)} already holds this complete snapshot; nothing to resume`);
    return { done: { folder, manifest: opened.complete, resumed: 'complete', stimuli: opened.complete.stimuli.count, layers: opened.complete.layers.length, bytesWritten: 0, wallSeconds: 0, setupSeconds: 0, stimuliPerSecond: 0 } };
  }
  if (!opened.resume) return { checkpoint: null };
  assertSameRecording(opened.resume.manifest, manifest, folder);
  manifest.created = opened.resume.manifest.created;
  return { checkpoint: opened.resume.progress };
}

export function assertSameRecording(stored: SnapshotManifest, wanted: SnapshotManifest, folder: string): void {
  const layerKey = (m: SnapshotManifest) => m.layers.map((l) => ({ name: l.name, op: l.op, depth: l.depth, shape: l.shape, dtype: l.dtype, keep: l.keep, compression: l.compression ?? 'none', file: l.file, from: l.from ?? null }));
  const checks: Array<[string, unknown, unknown]> = [
    ['the model', stored.model.sha256, wanted.model.sha256],
    ['the model input', stored.model.input, wanted.model.input],
    ['the stimulus listing', [stored.stimuli.listingDigest, stored.stimuli.count], [wanted.stimuli.listingDigest, wanted.stimuli.count]],
    ['the preprocessing', stored.preprocessing, wanted.preprocessing],
    ['the modulation', stored.modulation, wanted.modulation],
    ['the baseline', stored.baseline?.manifestSha256 ?? null, wanted.baseline?.manifestSha256 ?? null],
    ['the run mode', stored.run.mode, wanted.run.mode],
    ['--batch', stored.run.batch, wanted.run.batch],
    ['the layers (or --keep/--dtype/--compress)', layerKey(stored), layerKey(wanted)],
    ['--shard', stored.shard ?? null, wanted.shard ?? null],
  ];
  for (const [what, a, b] of checks) {
    if (JSON.stringify(a) !== JSON.stringify(b)) {
      throw new UsageError('E_RESUME', `--resume: ${folder} was recorded with other ${what.replace(/^the /, '')} than these options give (${short(a)} vs ${short(b)})`, {
        hint: 'resume with the options of the interrupted run, or record into a new folder',
      });
    }
  }
}

function short(value: unknown): string {
  const text = JSON.stringify(value) ?? 'none';
  return text.length > 60 ? `${text.slice(0, 57)}...` : text;
}

/** The layers named in `names`, in depth order. @throws UsageError naming a tensor the model lacks. */
export function pickLayers(layers: readonly LayerInfo[], names: readonly string[], modelName: string): LayerInfo[] {
  const byName = new Map(layers.map((l) => [l.name, l]));
  for (const name of names) {
    if (!byName.has(name)) throw new UsageError('E_SELECTOR', `tensor "${name}" is not a recordable tensor of ${modelName}`, { hint: closestHint(name, [...byName.keys()]) || undefined });
  }
  const wanted = new Set(names);
  return layers.filter((l) => wanted.has(l.name));
}

function channelsOf(layer: LayerInfo): number {
  return channelCount(layer.shape, layer.layout);
}

function checkShape(layer: LayerInfo, tensor: StoredTensor, rows: number, fixedBatch: number | null): void {
  const expected = (fixedBatch ?? rows) * layer.elements;
  if (tensor.data.length !== expected) {
    throw new UsageError('E_RUNTIME_OUTPUT', `"${layer.name}" came back with shape [${tensor.dims.join(', ')}], expected [${fixedBatch ?? rows}, ${layer.shape.join(', ')}] (shapes that depend on the batch are not supported)`);
  }
}

export type { FeedBatch } from './runtime-calls.js';

/**
 * The pipelined loop: while the runtime computes batch k, the feeds of batch k+1 are prepared and the
 * outputs of batch k−1 are written. At most two feed batches and two output batches are alive.
 */
export async function runPipelined<T = Record<string, FloatTensor>>(
  batches: number,
  readBatch: (k: number) => Promise<FeedBatch>,
  run: (feeds: Record<string, FloatTensor>) => Promise<T>,
  write: (first: number, rows: number, outputs: T) => void | Promise<void>,
): Promise<void> {
  let nextInput = batches > 0 ? readBatch(0) : null;
  nextInput?.catch(() => undefined);
  let pending: { first: number; rows: number; outputs: T } | null = null;
  for (let k = 0; k < batches; k++) {
    const input = await nextInput!;
    nextInput = k + 1 < batches ? readBatch(k + 1) : null;
    nextInput?.catch(() => undefined); // surfaced when awaited
    const running = run(input.feeds);
    running.catch(() => undefined);
    if (pending) await write(pending.first, pending.rows, pending.outputs);
    pending = { first: input.first, rows: input.rows, outputs: await running };
  }
  if (pending) await write(pending.first, pending.rows, pending.outputs);
}


/**
 * Resuming: re-reads the stimuli the checkpoint says are recorded and compares the SHA-256 of each one's
 * input bytes (as fed to the network, after preprocessing) with the digest logged when it was recorded,
 * so that a recording is never finished on other stimuli than it began with (ids and labels alone are
 * compared by `assertSameRecording`; this compares the contents).
 * @param digests the logged digests (local row order); rows [0, doneRows) are compared.
 * @throws UsageError `E_RESUME` naming the first stimulus whose bytes differ.
 */
async function assertSameStimuli(run: RecordRun, digests: Uint8Array, doneRows: number, folder: string): Promise<void> {
  const { source, range, batch } = run;
  const per = run.channels * run.height * run.width;
  const data = new Float32Array(batch * per);
  for (let local = 0; local < doneRows; local += batch) {
    const rows = Math.min(batch, doneRows - local);
    await source.read(range.start + local, rows, data);
    for (let r = 0; r < rows; r++) {
      const digest = createHash('sha256').update(new Uint8Array(data.buffer, r * per * 4, per * 4)).digest();
      const at = (local + r) * STIMULUS_DIGEST_BYTES;
      if (!digest.equals(digests.subarray(at, at + STIMULUS_DIGEST_BYTES))) {
        const index = range.start + local + r;
        throw new UsageError('E_RESUME', `--resume: stimulus "${source.ids[index]}" (index ${index}) is not what the interrupted run recorded in ${displayPath(folder)}: its input bytes changed (SHA-256 differs)`, {
          hint: 'resume with the stimuli of the interrupted run, or record again without --resume (into a new folder, or with --force)',
        });
      }
    }
  }
}

/** The layer counts of `tally` plus the stimuli's: the checkpoint's own count for rows before `from`, and the per-row counts of rows [from, to). */
function fedTally(tally: NonFiniteTally, perRow: Uint32Array, from: number, to: number): NonFiniteTally {
  const whole = new NonFiniteTally(tally.toRecord());
  for (let r = from; r < to; r++) whole.add(STIMULI_KEY, perRow[r]!);
  return whole;
}

/**
 * The input shape to inspect and run a model with, for models whose input has free non-batch axes:
 * `inputShape` when given; else [1, C, H, W] from `size` (images are resized to it); else the shape of
 * a `.npy` stimulus array, read from its header, when it fits the model's fixed axes. Undefined when the
 * input has no free non-batch axis (or nothing tells its shape: `inspectModel` then asks for one).
 */
export function chooseInputShape(model: LoadedModel, options: Pick<RecordOptions, 'inputShape' | 'size' | 'stimuli'>): number[] | undefined {
  if (options.inputShape) return options.inputShape;
  const declared = model.input.dims;
  if (!declared.some((d, i) => i > 0 && typeof d !== 'number')) return undefined;
  if (options.size && declared.length === 4 && typeof declared[1] === 'number') return [1, declared[1], options.size[0], options.size[1]];
  // only a regular file: a FIFO would block the header read (openStimulusSource then refuses it)
  if (declared.length === 4 && extname(options.stimuli).toLowerCase() === '.npy' && existsSync(options.stimuli) && statSync(options.stimuli).isFile()) {
    const shape = readNpyHeader(options.stimuli).shape;
    if (shape.length === 4 && shape.slice(1).every((d, i) => d > 0 && (typeof declared[i + 1] !== 'number' || declared[i + 1] === d))) {
      return [typeof declared[0] === 'number' ? declared[0] : 1, ...shape.slice(1)];
    }
  }
  return undefined;
}

/** For messages: a path relative to the working folder. */
export function displayPath(path: string): string {
  const rel = relative(process.cwd(), path);
  return rel.startsWith('..') ? path : rel || '.';
}
