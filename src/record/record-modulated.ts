import { createHash } from 'node:crypto';
import { existsSync, readFileSync, renameSync } from 'node:fs';
import { join, relative } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import { exposeForRuntime } from '../graph/instrument.js';
import { injectModulations, modulationInputDims, modulationInputNames, type InjectionSite } from '../graph/inject.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { weightLayerDepths } from '../graph/structure.js';
import { extractTail, upstreamCut } from '../graph/tail.js';
import { evenRows, runBytesOption, runRowBytes, rowsWithin } from '../graph/run-memory.js';
import { fillModulationInputs, inputLength } from '../modulation/inputs.js';
import { resolveModulations } from '../modulation/resolve.js';
import { loadModulationSpec } from '../modulation/spec.js';
import type { ModulationSpec, ResolveContext, ResolvedModulation } from '../modulation/types.js';
import { modulationSites } from './site-shapes.js';
import { createNetworkSession, type FloatTensor } from '../session/network-session.js';
import { LayerFileWriter, manifestFields } from '../snapshot/layer-file.js';
import { FORMAT_VERSION, layerLayout, writeManifest, type ManifestLayer, type SnapshotManifest } from '../snapshot/manifest.js';
import { openSnapshot, type LayerBatch, type Snapshot } from '../snapshot/snapshot.js';
import { writeStimuliFile } from '../snapshot/stimuli-file.js';
import { listingDigest, openStimulusSource } from '../stimuli/source.js';
import { TOOL_VERSION } from '../version.js';
import { inspectModel, type LayerInfo, type ModelInspection } from './inspect-model.js';
import { assertApartFromInputs, openOutputFolder, resolveOutFolder } from '../outputs/output-folder.js';
import { countNonFinite, nonFiniteNotice, NonFiniteTally, storageBound } from './non-finite.js';
import { checkpointSha256, removeProgress, writeProgress, type ProgressRecord } from '../snapshot/progress-file.js';
import { chooseInputShape, displayPath, markIncomplete, settleOutputFolder, recordSnapshot, runPipelined, type RecordOptions, type RecordSummary } from './record-snapshot.js';

/** Options of `recordModulated`: a recording plus the modulation and, optionally, its baseline. */
export interface RecordModulatedOptions extends RecordOptions {
  /** A spec file path or an already parsed spec. */
  modulate: string | ModulationSpec;
  /** Baseline snapshot folder: the run pairs with it, records its layers, and replays only the tail when it can. */
  from?: string;
  /** Tables for the `tuning` / `sensitivity` kinds and `lesion` with `top`. */
  tables?: ResolveContext['tables'];
  /** Category names for table kinds (default: the baseline's or the stimuli's categories). */
  categories?: string[];
  /** Never replay the tail; always run the whole network (for checks and benchmarks). */
  fullRun?: boolean;
  /**
   * Bytes of tensors one runtime call of the tail replay may hold (default `DEFAULT_RUN_BYTES`): a
   * baseline batch is split into runs of fewer stimuli where its outputs would exceed it.
   */
  runBytes?: number;
}

export { siteShapes } from './site-shapes.js';

/** Resolves a spec against an inspected model (throws UsageErrors naming the field). */
export function resolveForModel(spec: ModulationSpec, inspection: ModelInspection, categories: readonly string[] | undefined, tables: ResolveContext['tables']): ResolvedModulation[] {
  return resolveModulations(spec, {
    sites: modulationSites(inspection),
    siteNames: inspection.layers.map((l) => l.name),
    ...(categories ? { categories } : {}),
    ...(tables ? { tables } : {}),
  });
}

/** The injection sites for resolved modulations. */
export function injectionSites(resolved: readonly ResolvedModulation[], _inspection?: ModelInspection): InjectionSite[] {
  return resolved.map((r) => ({ site: r.site, shape: r.siteShape.shape, spatial: r.spatial, featureAxis: r.siteShape.layout.featureAxis ?? 0, ...(r.siteShape.shared ? { shared: true } : {}) }));
}

/** Builds the G/B feeds of every site for a batch. */
export function modulationFeeds(resolved: readonly ResolvedModulation[], sites: readonly InjectionSite[], first: number, rows: number): Record<string, FloatTensor> {
  const feeds: Record<string, FloatTensor> = {};
  resolved.forEach((r, i) => {
    const length = inputLength(r, rows);
    const gain = new Float32Array(length);
    const offset = new Float32Array(length);
    fillModulationInputs(r, { firstStimulus: first, rows }, gain, offset);
    const dims = modulationInputDims(sites[i]!, rows);
    const names = modulationInputNames(r.site);
    feeds[names.gain] = { data: gain, dims };
    feeds[names.offset] = { data: offset, dims };
  });
  return feeds;
}

/** Throws unless `baseline` was recorded from the same model file. */
export function assertSameModel(baseline: Snapshot, model: LoadedModel, from: string): void {
  if (baseline.manifest.model.sha256 !== model.sha256) {
    throw new UsageError('E_PAIRING', `--from ${from} was recorded from a different model (${baseline.manifest.model.file}, sha256 ${baseline.manifest.model.sha256.slice(0, 12)}…; this model is ${model.sha256.slice(0, 12)}…)`);
  }
  if (baseline.manifest.modulation !== null) {
    throw new UsageError('E_PAIRING', `--from ${from} is itself a modulated snapshot; pair with a baseline (recorded without --modulate)`);
  }
}

/**
 * Records a modulated snapshot. With `from`, the run records the baseline's layers and pairs with it;
 * when every tensor the downstream part of the network needs was recorded in the baseline at full
 * float32 resolution, only that tail is run, fed with the baseline's recorded values, and the layers
 * upstream of the sites are referenced from the baseline (not recomputed, not copied). Otherwise the
 * whole modulated network runs, and `run.reason` in the manifest says why.
 * @throws UsageError for a bad spec, a site the model lacks, or a baseline that does not pair.
 */
export async function recordModulated(options: RecordModulatedOptions): Promise<RecordSummary> {
  const model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
  const spec = typeof options.modulate === 'string' ? loadModulationSpec(options.modulate) : options.modulate;
  const baseline = options.from ? openSnapshot(options.from) : null;
  for (const notice of spec.notices ?? []) options.onNotice?.(notice);
  assertApartFromInputs(resolveOutFolder(options.out), '--out', [
    { option: 'MODEL', path: model.path },
    { option: '--stimuli', path: options.stimuli },
    { option: '--labels', path: options.labels },
    { option: '--from', path: options.from },
    { option: '--modulate', path: typeof options.modulate === 'string' ? options.modulate : null },
  ]);
  if (baseline) assertSameModel(baseline, model, options.from!);
  const inputShape = chooseInputShape(model, options);
  const inspection = await inspectModel(model, inputShape ? { inputShape } : {});
  const categories = options.categories ?? (baseline ? baseline.categories : undefined);
  const resolved = resolveForModel(spec, inspection, categories, options.tables);
  const sites = injectionSites(resolved, inspection);
  // where each site sits in the graph (recorded or not): diff places the site and counts depth below it from these
  const placeOf = (name: string) => {
    const info = inspection.layers.find((l) => l.name === name);
    if (info) return { name, depth: info.depth, weightDepth: info.weightDepth };
    // a site that is not recordable (batch merged with tokens): placed after the last recordable tensor above it
    const at = inspection.structure.producer.get(name);
    let depth = -1;
    for (const l of inspection.layers) if (at !== undefined && (inspection.structure.producer.get(l.name) ?? -1) < at) depth = Math.max(depth, l.depth);
    return { name, depth, weightDepth: at === undefined ? -1 : weightLayerDepths(inspection.structure).get(name) ?? -1 };
  };
  const manifestModulation = { spec: spec.source, modulations: resolved.map((r) => r.source), sites: [...new Set(resolved.map((r) => r.site))].map(placeOf) };
  const manifestBaseline = baseline ? { path: relative(resolveOutFolder(options.out), baseline.folder) || '.', manifestSha256: createHash('sha256').update(readFileSync(join(baseline.folder, 'manifest.json'))).digest('hex') } : null;

  if (baseline) {
    if (options.layers && options.layers !== 'default' && !options.layerNames) {
      throw new UsageError('E_SELECTOR', '--layers cannot be combined with --from: a modulated run records exactly its baseline\'s layers');
    }
    const source = openStimulusSource(options.stimuli, { preprocessing: baseline.manifest.preprocessing ?? { size: [inspection.input.shape[2]!, inspection.input.shape[3]!], mean: [0], std: [1], bgr: false }, channels: inspection.input.shape[1]!, ...(options.labels ? { labelsFile: options.labels } : {}) });
    if (listingDigest(source) !== baseline.manifest.stimuli.listingDigest) {
      throw new UsageError('E_PAIRING', `--stimuli ${options.stimuli} lists other stimuli (or labels) than --from ${options.from} (${source.count} vs ${baseline.manifest.stimuli.count})`);
    }
    const baseShard = baseline.manifest.shard ?? null;
    if (options.shard && (!baseShard || baseShard.index !== options.shard.index || baseShard.count !== options.shard.count)) {
      throw new UsageError('E_PAIRING', `--shard ${options.shard.index}/${options.shard.count} needs --from to be the same shard of a sharded baseline; ${options.from} is ${baseShard ? `shard ${baseShard.index}/${baseShard.count}` : 'a whole recording'}`, {
        hint: 'record the baseline with the same --shard, or drop --shard (a modulated run from a shard baseline is that shard)',
      });
    }
    if (baseShard && !options.shard) options = { ...options, shard: { index: baseShard.index, count: baseShard.count } };
    const layerNames = baseline.manifest.layers.map((l) => l.name);
    const plan = options.fullRun ? { reason: 'full run requested' } : planTail(model, inspection, baseline, resolved.map((r) => r.site), layerNames);
    if ('tail' in plan) {
      return replayTail({ options, model, inspection, baseline, resolved, sites, tail: plan.tail, manifestModulation, manifestBaseline: manifestBaseline! });
    }
    if (!options.fullRun) {
      const unrecorded = [...new Set(resolved.map((r) => r.site))].filter((site) => !layerNames.includes(site));
      const fix = unrecorded.length > 0 ? `record the baseline with --layers 'default+${unrecorded.join('+')}' (full, float32)` : 'record the baseline with --keep full --dtype float32';
      options.onNotice?.(`running the whole network: ${plan.reason}; to replay only the part downstream of the site, ${fix}`);
    }
    const summary = await recordSnapshot({
      ...options,
      model,
      layerNames,
      // the baseline's codec unless --compress says otherwise (as a tail replay does)
      ...(options.compress === undefined ? { compress: baseline.manifest.layers.find((l) => l.from !== 'baseline')?.compression ?? 'none' } : {}),
      extension: {
        transformModel: (m) => injectModulations(m, sites),
        extraFeeds: (first, rows) => modulationFeeds(resolved, sites, first, rows),
        manifestModulation,
        manifestBaseline,
        beforeComplete: (manifest) => {
          manifest.run.reason = plan.reason;
          if (manifest.stimuli.digest !== baseline.manifest.stimuli.digest) {
            throw new UsageError('E_PAIRING', `the stimuli of this run differ from those of --from ${options.from} (same files, other pixels or preprocessing)`);
          }
        },
      },
    });
    return summary;
  }
  return recordSnapshot({
    ...options,
    model,
    extension: {
      transformModel: (m) => injectModulations(m, sites),
      extraFeeds: (first, rows) => modulationFeeds(resolved, sites, first, rows),
      manifestModulation,
      manifestBaseline: null,
    },
  });
}

/** Either a replayable tail or the reason why the whole network must run. */
export type TailPlan = { tail: NonNullable<ReturnType<typeof extractTail>> } | { reason: string };

/**
 * Decides whether the tail can be replayed from `baseline`, and why not. The tail is fed from the cut
 * closest to the sites among the tensors the baseline recorded at full float32 resolution
 * (`upstreamCut`): a site the baseline did not record (or kept only as channel means or float16) is
 * computed from recorded tensors further upstream, together with the unrecorded tensors between them.
 */
export function planTail(model: LoadedModel, inspection: ModelInspection, baseline: Snapshot, sites: string[], layerNames: string[]): TailPlan {
  const recorded = new Map(baseline.manifest.layers.map((l) => [l.name, l]));
  const canFeed = (name: string): boolean => {
    const entry = recorded.get(name);
    return entry !== undefined && entry.keep === 'full' && entry.dtype === 'float32';
  };
  const cut = upstreamCut(inspection.structure, sites, canFeed);
  if ('missing' in cut) {
    const unfed = sites.filter((site) => !canFeed(site));
    const what = unfed.length > 0 ? `the site${unfed.length > 1 ? 's' : ''} ${unfed.map((s) => `"${s}"`).join(', ')}` : 'the part downstream of the sites';
    return { reason: `no tensors the baseline recorded at full float32 resolution separate ${what} from "${cut.missing}"` };
  }
  const tail = extractTail(model, inspection.structure, sites, layerNames, cut.recompute);
  if (!tail) return { reason: 'nothing downstream of the sites' };
  return { tail };
}

interface TailRun {
  options: RecordModulatedOptions;
  model: LoadedModel;
  inspection: ModelInspection;
  baseline: Snapshot;
  resolved: ResolvedModulation[];
  sites: InjectionSite[];
  tail: NonNullable<ReturnType<typeof extractTail>>;
  manifestModulation: unknown;
  manifestBaseline: NonNullable<SnapshotManifest['baseline']>;
}

/** Runs only the tail, fed from the baseline's recorded boundary tensors. */
async function replayTail(run: TailRun): Promise<RecordSummary> {
  const started = performance.now();
  const { options, baseline, tail } = run;
  const folder = resolveOutFolder(options.out);
  const byName = new Map(run.inspection.layers.map((l) => [l.name, l]));
  const siteNames = new Set(run.resolved.map((r) => r.site));
  // Layers the tail changes: its computed tensors and the sites themselves; the rest keep baseline values.
  const changed = baseline.manifest.layers.filter((l) => tail.computed.has(l.name) || siteNames.has(l.name));
  const layers: ManifestLayer[] = baseline.manifest.layers.map((l) => {
    if (!changed.includes(l)) return { ...l, from: 'baseline' as const };
    const { sha256: _s, bytes: _b, rows: _r, from: _f, means: _m, compression: baseCompression, ...rest } = l;
    const compression = options.compress ?? baseCompression ?? 'none';
    return { ...rest, dtype: options.dtype ?? l.dtype, ...(compression !== 'none' ? { compression } : {}) };
  });
  const manifest: SnapshotManifest = {
    format: FORMAT_VERSION,
    tool: { name: 'sonde', version: TOOL_VERSION },
    model: baseline.manifest.model,
    stimuli: { ...baseline.manifest.stimuli },
    preprocessing: baseline.manifest.preprocessing,
    modulation: run.manifestModulation,
    readout: baseline.manifest.readout ?? null,
    baseline: run.manifestBaseline,
    run: { mode: 'tail', batch: baseline.manifest.run.batch, threads: options.threads ?? 0 },
    created: new Date().toISOString(),
    layers,
    ...(baseline.manifest.shard ? { shard: baseline.manifest.shard } : {}),
    complete: false,
  };
  const opened = openOutputFolder(folder, { force: options.force ?? false, resume: options.resume ?? false, ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
  try {
    const settled = settleOutputFolder(opened, manifest, folder, options.onNotice);
    if ('done' in settled) return settled.done;
    const checkpoint = settled.checkpoint;
    if (opened.resume) {
      if (checkpoint) options.onNotice?.(`resuming ${displayPath(folder)} after ${checkpoint.stimuli} of ${manifest.stimuli.count} stimuli (${checkpoint.batches} batches)`);
      else removeProgress(folder);
    }
    writeManifest(folder, manifest);
    return await replayInto(folder, manifest, checkpoint, run, byName, siteNames, started);
  } finally {
    opened.lock.release();
  }
}

async function replayInto(folder: string, manifest: SnapshotManifest, checkpoint: ProgressRecord | null, run: TailRun, byName: Map<string, LayerInfo>, siteNames: Set<string>, started: number): Promise<RecordSummary> {
  const { options, baseline, tail } = run;
  const changedEntries = manifest.layers.filter((l) => l.from !== 'baseline');
  const count = baseline.manifest.stimuli.count;
  const batchRows = baseline.manifest.run.batch;
  const doneBatches = checkpoint?.batches ?? 0;
  const doneRows = checkpoint?.stimuli ?? 0;
  const writers: LayerFileWriter[] = [];
  const checkpointSeconds = options.checkpointSeconds ?? 2;
  let lastCheckpoint = performance.now();
  try {
    for (const l of changedEntries) {
      const path = join(folder, l.file);
      const layout = { name: l.name, shape: l.shape, dtype: l.dtype, keep: l.keep, layout: layerLayout(l), compression: l.compression ?? ('none' as const) };
      if (checkpoint) {
        const at = checkpoint.files[l.file];
        if (at === undefined) throw new RuntimeFailure('E_RESUME', `${folder}/progress.json has no checkpoint for ${l.file}`, { hint: 'record again without --resume' });
        if (!existsSync(`${path}.partial`) && existsSync(path)) renameSync(path, `${path}.partial`);
        const writer = new LayerFileWriter(path, layout, { resumeAt: at, resumeSha256: checkpointSha256(folder, checkpoint, l.file) });
        if (writer.rows !== doneRows) throw new RuntimeFailure('E_RESUME', `${path}.partial holds ${writer.rows} rows at the checkpoint, expected ${doneRows}`, { hint: 'record again without --resume' });
        writers.push(writer);
      } else writers.push(new LayerFileWriter(path, layout));
    }
    const tally = checkpoint && !checkpoint.nonFinite ? null : new NonFiniteTally(checkpoint?.nonFinite);
    const takeCheckpoint = (batches: number, stimuli: number) => {
      const files: Record<string, number> = {};
      const sha256: Record<string, string> = {};
      writers.forEach((writer, i) => {
        files[changedEntries[i]!.file] = writer.checkpoint();
        sha256[changedEntries[i]!.file] = writer.checkpointSha256();
      });
      writeProgress(folder, { format: 1, batches, stimuli, files, sha256, ...(tally ? { nonFinite: tally.toRecord() } : {}) });
      lastCheckpoint = performance.now();
    };
    if (!checkpoint) takeCheckpoint(0, 0);
    const injected = injectModulations(tail.model, run.sites);
    const fetch = changedEntries.map((l) => l.name);
    // rows per runtime call from the bytes the call holds (graph/run-memory.ts), at most a baseline batch
    const elements = (name: string): number | undefined => byName.get(name)?.elements;
    const fed = tail.boundary.map((name) => (siteNames.has(name) ? `${name}::raw` : name));
    const rowBytes = runRowBytes(injected, (name) => elements(name.endsWith('::raw') ? name.slice(0, -5) : name), { fed, fetched: fetch });
    const rowsPerCall = evenRows(batchRows, rowsWithin(runBytesOption(options.runBytes), rowBytes, batchRows));
    const session = await createNetworkSession(exposeForRuntime(injected, fetch), { threads: options.threads ?? 0, label: `${run.model.fileName} (downstream part)` });
    const setupSeconds = (performance.now() - started) / 1000;
    const firstIndex = baseline.firstIndex;
    const streams = tail.boundary.map((name) => baseline.readLayer(name, doneRows > 0 ? { range: [firstIndex + doneRows, firstIndex + count] } : {}));
    const rows = new BoundaryRows(streams, tail.boundary, tail.boundary.map((name) => byName.get(name)!.elements), options.from!);
    let bytesWritten = 0;
    let batchesDone = doneBatches;
    let nextRow = doneRows;
    try {
      await runPipelined(
        Math.ceil((count - doneRows) / rowsPerCall),
        async () => {
          const take = Math.min(rowsPerCall, count - nextRow);
          nextRow += take;
          const part = await rows.take(take);
          const feeds: Record<string, FloatTensor> = {};
          tail.boundary.forEach((name, i) => {
            feeds[fed[i]!] = { data: part.values[i]!, dims: [take, ...byName.get(name)!.shape] };
          });
          Object.assign(feeds, modulationFeeds(run.resolved, run.sites, part.first, take));
          return { first: part.first, rows: take, feeds };
        },
        (feeds) => session.run(feeds, fetch),
        async (first, rows, outputs) => {
          // compressed layers: every layer's values compressed side by side on the thread pool first
          await Promise.all(changedEntries.map((entry, i) => (outputs[entry.name] ? writers[i]!.precompress(outputs[entry.name]!.data, rows) : undefined)));
          changedEntries.forEach((entry, i) => {
            const tensor = outputs[entry.name];
            if (!tensor) throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the runtime returned no value for "${entry.name}"`);
            writers[i]!.write(first, rows, tensor.data);
            tally?.add(entry.file, countNonFinite(tensor.data, 0, tensor.data.length, storageBound(entry.dtype, entry.keep)));
            bytesWritten += tensor.data.byteLength;
          });
          batchesDone += 1;
          const done = first + rows - firstIndex;
          if (done === count || (performance.now() - lastCheckpoint) / 1000 >= checkpointSeconds) takeCheckpoint(batchesDone, done);
          options.onProgress?.({ done, total: count, elapsedSeconds: (performance.now() - started) / 1000, bytesWritten });
        },
      );
    } finally {
      await rows.close();
      await session.close();
    }
    let total = 0;
    writers.forEach((writer, i) => {
      const result = writer.finish();
      Object.assign(changedEntries[i]!, { ...manifestFields(changedEntries[i]!.file, result), ...(tally ? { nonFinite: tally.get(changedEntries[i]!.file) } : {}) });
      total += result.bytes + (result.means?.bytes ?? 0);
    });
    const stimuliFile = writeStimuliFile(join(folder, 'stimuli.arrow'), baseline.stimuli.ids, baseline.stimuli.labels, { firstIndex, ...(baseline.stimuli.digests ? { digests: baseline.stimuli.digests } : {}) });
    total += stimuliFile.bytes;
    manifest.stimuli.table = { sha256: stimuliFile.sha256, bytes: stimuliFile.bytes };
    const wallSeconds = (performance.now() - started) / 1000;
    manifest.run.wallSeconds = Math.round(wallSeconds * 1000) / 1000;
    manifest.complete = true;
    delete manifest.error;
    writeManifest(folder, manifest);
    removeProgress(folder);
    const notice = nonFiniteNotice(manifest);
    if (notice) options.onNotice?.(notice);
    return { folder, manifest, ...(options.resume ? { resumed: doneRows } : {}), stimuli: count, layers: manifest.layers.length, bytesWritten: total, wallSeconds, setupSeconds, stimuliPerSecond: (count - doneRows) / wallSeconds };
  } catch (error) {
    for (const writer of writers) writer.suspend();
    throw markIncomplete(folder, manifest, error);
  }
}

/**
 * Rows of a baseline's boundary layers in runs of any size: the layers' record batches are read in
 * step, checked to hold the same stimuli, and copied out `rows` at a time (a run may span two record
 * batches; the copies are the runtime's feeds, never views of the Arrow buffers).
 */
class BoundaryRows {
  private batches: LayerBatch[] | null = null;
  private at = 0;

  constructor(private readonly streams: AsyncGenerator<LayerBatch>[], private readonly names: readonly string[], private readonly perRow: readonly number[], private readonly from: string) {}

  /** The next `rows` rows: the global index of the first, and one fresh array per boundary layer. */
  async take(rows: number): Promise<{ first: number; values: Float32Array[] }> {
    const values = this.perRow.map((per) => new Float32Array(rows * per));
    let first = -1;
    for (let filled = 0; filled < rows; ) {
      if (!this.batches || this.at === this.batches[0]!.rows) await this.next();
      const batches = this.batches!;
      const n = Math.min(rows - filled, batches[0]!.rows - this.at);
      if (first < 0) first = batches[0]!.index[this.at]!;
      else if (batches[0]!.index[this.at] !== first + filled) throw new RuntimeFailure('E_LAYER_READ', `baseline ${this.from}: stimulus indices are not contiguous at ${first + filled}`);
      batches.forEach((batch, i) => {
        const per = this.perRow[i]!;
        values[i]!.set(batch.activation!.subarray(this.at * per, (this.at + n) * per), filled * per);
      });
      this.at += n;
      filled += n;
    }
    return { first, values };
  }

  private async next(): Promise<void> {
    const parts = await Promise.all(this.streams.map((s) => s.next()));
    const head = parts[0]?.value as LayerBatch | undefined;
    if (!head) throw new RuntimeFailure('E_LAYER_READ', `baseline ${this.from} ended early`);
    this.batches = parts.map((part, i) => {
      const batch = part.value as LayerBatch | undefined;
      if (!batch || batch.rows !== head.rows || batch.index[0] !== head.index[0] || !batch.activation) throw new RuntimeFailure('E_LAYER_READ', `baseline layer "${this.names[i]}" is not aligned with the others (batch structure differs)`);
      return batch;
    });
    this.at = 0;
  }

  async close(): Promise<void> {
    await Promise.all(this.streams.map((s) => s.return(undefined)));
  }
}
