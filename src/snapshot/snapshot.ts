import { open, type FileHandle } from 'node:fs/promises';
import { existsSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { Message, RecordBatchReader, type RecordBatch } from 'apache-arrow';
import { RuntimeFailure, SondeError, UsageError, closestHint } from '../errors.js';
import { INPUT_LIMITS, readInputFile, realPathInside } from '../disk/input-file.js';
import { verifyStimulusTable } from './stimuli-file.js';
import { LayerBlockFile } from './block-reader.js';
import { startLayerCheck, type LayerVerification } from './layer-integrity.js';
import { float16ToFloat32 } from './float16.js';
import { registerArrowCodecs } from './compression.js';
import { channelCount, spatialSize } from './layer-file.js';
import { assertComplete, assertInside, baselineLayerProblems, layerLayout, readManifest, type ManifestLayer, type SnapshotManifest } from './manifest.js';

/** One record batch of a layer, as typed arrays. */
export interface LayerBatch {
  /** Global stimulus indices of the rows. */
  index: Int32Array;
  rows: number;
  /** rows × C spatial channel means (row-major). */
  channelMeans: Float32Array;
  /** rows × elements activations (row-major, float16 widened to float32), or null for keep = channels or when not requested. */
  activation: Float32Array | null;
  /** With `raw`, for a float16 layer: the stored float16 bit patterns (and `activation` is null). */
  activationFloat16?: Uint16Array;
}

/** Options of `Snapshot.readLayer`. */
export interface ReadLayerOptions {
  /** Also read the `activation` column (default true when the layer kept it). */
  activation?: boolean;
  /**
   * Only the rows with global index in [start, end): batches outside are skipped without reading their
   * bodies, batches that straddle a bound are sliced (views).
   */
  range?: [number, number];
  /** Float16 layers: hand out the stored bit patterns (`activationFloat16`) instead of widening. */
  raw?: boolean;
  /**
   * Reuse two read buffers in turn (fastest, no garbage): a batch's arrays are then valid only until the
   * batch after the next one is requested. Default false: every batch owns its memory.
   */
  reuse?: boolean;
}

/** A recorded snapshot opened for reading. */
export interface Snapshot {
  /** Absolute path of the snapshot folder. */
  folder: string;
  manifest: SnapshotManifest;
  /**
   * Stimulus ids and label sets, in index order; `digests` (N × 32 bytes): the per-stimulus SHA-256 of
   * the input bytes, when stimuli.arrow has them (format 2).
   */
  stimuli: { ids: string[]; labels: string[][]; digests?: Uint8Array };
  /** Global index of this snapshot's first stimulus: the shard's first, 0 for a whole listing. */
  firstIndex: number;
  /** Categories present in the labels, sorted. */
  categories: string[];
  /** The manifest entry of a layer. @throws UsageError with close names when absent. */
  layer(name: string): ManifestLayer;
  /** Channels and elements per channel of a layer. */
  layerGeometry(name: string): { channels: number; spatial: number; elements: number };
  /** Streams a layer's record batches in file order; memory holds one batch at a time. */
  readLayer(name: string, options?: ReadLayerOptions): AsyncGenerator<LayerBatch>;
  /** Reads all channel means of a layer into one [N, C] array. */
  readChannelMeans(name: string): Promise<Float32Array>;
}

/** Options of `openSnapshot`. */
export interface OpenSnapshotOptions {
  /** Open a snapshot whose manifest says `complete: false` (checks, merging partial work). */
  allowIncomplete?: boolean;
  /**
   * How each layer file is checked against the manifest before its numbers are used (see
   * `LayerVerification`): `sha256` (default) checks size and SHA-256, `size-only` the size alone.
   */
  verify?: LayerVerification;
}

/**
 * Opens a complete snapshot folder: validates the manifest (format version, paths inside the folder,
 * also after following symbolic links) and loads the stimulus table. Layers are read lazily; each layer
 * file is checked against the manifest as it is read (size before the first batch, SHA-256 before the
 * last one; see `OpenSnapshotOptions.verify`).
 * @throws UsageError for a missing or malformed snapshot, or a file that a link leads out of its folder;
 *   RuntimeFailure for an incomplete one.
 */
export function openSnapshot(folder: string, options: OpenSnapshotOptions = {}): Snapshot {
  const root = resolve(folder);
  const manifest = readManifest(root);
  if (!options.allowIncomplete) assertComplete(manifest, folder);
  const verify = options.verify ?? 'sha256';
  const baselineRoot = manifest.baseline ? resolve(root, manifest.baseline.path) : null;
  if (baselineRoot && manifest.layers.some((l) => l.from === 'baseline') && existsSync(join(baselineRoot, 'manifest.json'))) {
    // layers read from the baseline must be the baseline's own layers of those names (a missing
    // baseline is reported when one of its layers is read)
    const problems = baselineLayerProblems(manifest, readManifest(baselineRoot));
    if (problems.length > 0) {
      throw new UsageError('E_MANIFEST', `${folder}/manifest.json: ${problems[0]}${problems.length > 1 ? ` (and ${problems.length - 1} more)` : ''}`, { hint: `run \`sonde check ${folder}\`; record the modulated snapshot again` });
    }
  }
  const stimuliPath = join(root, 'stimuli.arrow');
  const firstIndex = manifest.shard ? manifest.shard.stimuli[0] : 0;
  let bytes: Uint8Array;
  try {
    realPathInside(root, stimuliPath, `${folder}: stimuli.arrow`);
    bytes = readInputFile(stimuliPath, `${folder}: stimuli.arrow`, INPUT_LIMITS.table);
  } catch (error) {
    if (error instanceof SondeError) throw error;
    throw new UsageError('E_SNAPSHOT_STIMULI', `${folder}: stimuli.arrow cannot be read (${(error as NodeJS.ErrnoException).code ?? (error as Error).message.split('\n')[0]})`, { hint: `run \`sonde check ${folder}\`` });
  }
  // the labels and ids decide every detection and tuning number: verified like the layer files
  const verified = verifyStimulusTable(bytes, manifest, { firstIndex });
  if (!verified.table) {
    throw new UsageError('E_SNAPSHOT_STIMULI', `${folder}: stimuli.arrow ${verified.problems[0] ?? 'cannot be read'}`, {
      hint: `run \`sonde check ${folder}\`, then restore the file or record the snapshot again`,
    });
  }
  const { ids, labels, digests } = verified.table;
  const byName = new Map(manifest.layers.map((l) => [l.name, l]));
  const categories = [...new Set(labels.flat())].sort();
  const layer = (name: string): ManifestLayer => {
    const entry = byName.get(name);
    if (!entry) {
      throw new UsageError('E_LAYER_MISSING', `layer "${name}" is not in snapshot ${folder} (${manifest.layers.length} layers)`, {
        hint: closestHint(name, [...byName.keys()]) || undefined,
      });
    }
    return entry;
  };
  const fileOf = (entry: ManifestLayer, file = entry.file): { path: string; inside: string } => {
    if (entry.from === 'baseline') {
      if (!baselineRoot) throw new UsageError('E_MANIFEST', `${folder}: layer "${entry.name}" comes from a baseline but the manifest names none`);
      return { path: assertInside(baselineRoot, file, `baseline layer "${entry.name}" file`), inside: baselineRoot };
    }
    return { path: assertInside(root, file, `layer "${entry.name}" file`), inside: root };
  };
  const layerGeometry = (name: string) => {
    const entry = layer(name);
    const channels = channelCount(entry.shape, layerLayout(entry));
    const spatial = spatialSize(entry.shape, layerLayout(entry));
    return { channels, spatial, elements: channels * spatial };
  };
  async function* readLayer(name: string, readOptions: ReadLayerOptions = {}): AsyncGenerator<LayerBatch> {
    const entry = layer(name);
    const { channels, elements } = layerGeometry(name);
    const wantActivation = entry.keep === 'full' && readOptions.activation !== false;
    const raw = readOptions.raw === true && entry.dtype === 'float16';
    const range = readOptions.range;
    // channel means alone come from the layer's means file (format 3), verified on its own: the
    // activation bytes are neither read nor hashed
    const checked: ManifestLayer = !wantActivation && entry.keep === 'full' && entry.means ? { ...entry, file: entry.means.file, sha256: entry.means.sha256, bytes: entry.means.bytes } : entry;
    const { path, inside } = fileOf(entry, checked.file);
    let blocks: LayerBlockFile | null = null;
    let verified: () => Promise<void>;
    try {
      // a link (the file's or the layers folder's) may not lead out of the snapshot; size checked here,
      // the hash before the last batch is handed out
      realPathInside(inside, path, `layer file ${path} of "${name}"`);
      verified = startLayerCheck(path, checked, inside, verify);
      blocks = LayerBlockFile.open(path);
    } catch (error) {
      if (error instanceof SondeError) throw error;
      const code = (error as NodeJS.ErrnoException).code;
      if (code === 'ENOENT' || code === 'EACCES') throw new RuntimeFailure('E_LAYER_READ', `layer file ${path} of "${name}" cannot be opened`, { hint: 'the snapshot may be damaged; run `sonde check`' });
      throw new RuntimeFailure('E_LAYER_READ', `layer file ${path} of "${name}" is not a readable Arrow file (${(error as Error).message.split('\n')[0]})`, { hint: 'run `sonde check` on the snapshot' });
    }
    if (blocks) {
      // Sonde's own layout: positioned reads, viewed in place, the next batch read ahead
      yield* readBlocks(blocks, { channels, elements, wantActivation, raw, range, reuse: readOptions.reuse === true, path, firstIndex, verified });
      return;
    }
    await verified(); // another writer's layout: verify the whole file before reading any of it
    registerArrowCodecs(); // the general reader decompresses through apache-arrow's codec registry
    let handle;
    try {
      handle = await open(path, 'r');
    } catch {
      throw new RuntimeFailure('E_LAYER_READ', `layer file ${path} of "${name}" cannot be opened`, { hint: 'the snapshot may be damaged; run `sonde check`' });
    }
    try {
      let reader;
      try {
        reader = await RecordBatchReader.from(handle);
        await reader.open();
      } catch (error) {
        throw new RuntimeFailure('E_LAYER_READ', `layer file ${path} of "${name}" is not a readable Arrow file (${(error as Error).message.split('\n')[0]})`);
      }
      if (!reader.isFile()) throw new RuntimeFailure('E_LAYER_READ', `layer file ${path} is not in Arrow IPC file format`);
      const count = reader.numRecordBatches;
      let rowAt = firstIndex; // global index of the next batch's first row, if the file is in order
      for (let b = 0; b < count; b++) {
        if (range) {
          const rows = await batchRows(handle, reader.footer?.getRecordBatch(b) ?? null, path, b);
          const start = rowAt;
          rowAt += rows;
          if (start + rows <= range[0]) continue;
          if (start >= range[1]) break;
        }
        let batch: RecordBatch | null;
        try {
          batch = await reader.readRecordBatch(b);
        } catch (error) {
          throw new RuntimeFailure('E_LAYER_READ', `layer file ${path}: batch ${b} cannot be read (${(error as Error).message.split('\n')[0]})`);
        }
        if (!batch) break;
        const whole = toLayerBatch(batch, channels, elements, wantActivation, path, raw);
        yield range ? sliceBatch(whole, range, channels, elements, path) : whole;
      }
    } finally {
      await handle.close();
    }
  }
  async function readChannelMeans(name: string): Promise<Float32Array> {
    const { channels } = layerGeometry(name);
    const out = new Float32Array(manifest.stimuli.count * channels);
    for await (const batch of readLayer(name, { activation: false })) {
      for (let r = 0; r < batch.rows; r++) {
        const n = batch.index[r]! - firstIndex;
        if (n < 0 || n >= manifest.stimuli.count) throw new RuntimeFailure('E_LAYER_READ', `layer "${name}" holds stimulus index ${batch.index[r]} outside ${firstIndex}..${firstIndex + manifest.stimuli.count - 1}`);
        out.set(batch.channelMeans.subarray(r * channels, (r + 1) * channels), n * channels);
      }
    }
    return out;
  }
  return { folder: root, manifest, stimuli: { ids, labels, ...(digests ? { digests } : {}) }, firstIndex, categories, layer, layerGeometry, readLayer, readChannelMeans };
}

/** Rows of record batch `b`, from its message header alone (the body is not read). */
async function batchRows(handle: FileHandle, block: { offset: number; metaDataLength: number } | null, path: string, b: number): Promise<number> {
  if (!block) throw new RuntimeFailure('E_LAYER_READ', `layer file ${path}: the footer lists no batch ${b}`);
  const metadata = new Uint8Array(Math.max(0, block.metaDataLength - 8));
  const { bytesRead } = await handle.read(metadata, 0, metadata.length, block.offset + 8);
  try {
    if (bytesRead !== metadata.length) throw new Error('cut off');
    return Number((Message.decode(metadata).header() as { length: number }).length);
  } catch (error) {
    throw new RuntimeFailure('E_LAYER_READ', `layer file ${path}: the header of batch ${b} cannot be read (${(error as Error).message.split('\n')[0]})`);
  }
}

/** The rows of `batch` with global index in [range[0], range[1]) (views; the file's rows are in index order). */
function sliceBatch(batch: LayerBatch, range: [number, number], channels: number, elements: number, path: string): LayerBatch {
  let from = 0;
  while (from < batch.rows && batch.index[from]! < range[0]) from++;
  let to = from;
  while (to < batch.rows && batch.index[to]! < range[1]) to++;
  for (let r = from + 1; r < to; r++) {
    if (batch.index[r] !== batch.index[r - 1]! + 1) throw new RuntimeFailure('E_LAYER_READ', `layer file ${path}: stimulus indices are not consecutive (${batch.index[r - 1]} then ${batch.index[r]})`);
  }
  if (from === 0 && to === batch.rows) return batch;
  const rows = to - from;
  return {
    index: batch.index.subarray(from, to),
    rows,
    channelMeans: batch.channelMeans.subarray(from * channels, to * channels),
    activation: batch.activation ? batch.activation.subarray(from * elements, to * elements) : null,
    ...(batch.activationFloat16 ? { activationFloat16: batch.activationFloat16.subarray(from * elements, to * elements) } : {}),
  };
}

function toLayerBatch(batch: RecordBatch, channels: number, elements: number, wantActivation: boolean, path: string, raw = false): LayerBatch {
  const rows = batch.numRows;
  const indexData = batch.getChild('index')?.data[0];
  const meanData = batch.getChild('channel_mean')?.data[0]?.children[0];
  if (!indexData || !meanData) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${path} lacks the index or channel_mean column`);
  const meanWidth = (batch.getChild('channel_mean')!.type as { listSize?: number }).listSize;
  if (meanWidth !== channels) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${path}: channel_mean has ${String(meanWidth)} values per row, the manifest says ${channels}`);
  const index = (indexData.values as Int32Array).subarray(indexData.offset, indexData.offset + rows);
  const meanOffset = (batch.getChild('channel_mean')!.data[0]!.offset + meanData.offset) * 1;
  const channelMeans = (meanData.values as Float32Array).subarray(meanOffset * channels, (meanOffset + rows) * channels);
  let activation: Float32Array | null = null;
  let activationFloat16: Uint16Array | undefined;
  if (wantActivation) {
    const column = batch.getChild('activation')?.data[0];
    const child = column?.children[0];
    if (!column || !child) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${path} lacks the activation column`);
    const start = (column.offset + child.offset) * elements;
    const values = child.values as Float32Array | Uint16Array;
    if (values instanceof Uint16Array && raw) activationFloat16 = values.subarray(start, start + rows * elements);
    else activation = values instanceof Uint16Array ? float16ToFloat32(values.subarray(start, start + rows * elements)) : values.subarray(start, start + rows * elements);
    const width = (column.type as { listSize?: number }).listSize;
    if (width !== elements) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${path}: activation has ${String(width)} values per row, the manifest shape says ${elements}`);
  }
  if (channelMeans.length !== rows * channels) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${path}: channel_mean has ${channelMeans.length / rows} values per row, manifest says ${channels}`);
  return { index, rows, channelMeans, activation, ...(activationFloat16 ? { activationFloat16 } : {}) };
}

interface BlockReadOptions {
  channels: number;
  elements: number;
  wantActivation: boolean;
  raw: boolean;
  range: [number, number] | undefined;
  reuse: boolean;
  path: string;
  firstIndex: number;
  /** Resolves once the file's SHA-256 matched the manifest; awaited before the last batch is handed out. */
  verified: () => Promise<void>;
}

/** Streams the batches of a layer file in Sonde's layout, reading one batch ahead. */
async function* readBlocks(file: LayerBlockFile, o: BlockReadOptions): AsyncGenerator<LayerBatch> {
  try {
    const buffers: Array<Uint8Array | undefined> = [undefined, undefined];
    const wanted: number[] = [];
    if (o.range) {
      let rowAt = o.firstIndex;
      for (let b = 0; b < file.count; b++) {
        const rows = await file.rows(b);
        const start = rowAt;
        rowAt += rows;
        if (start + rows <= o.range[0]) continue;
        if (start >= o.range[1]) break;
        wanted.push(b);
      }
    } else for (let b = 0; b < file.count; b++) wanted.push(b);
    const start = (j: number) => {
      const promise = file.read(wanted[j]!, o.wantActivation, o.reuse ? buffers[j % 2] : undefined).then((result) => {
        if (o.reuse) buffers[j % 2] = result.buffer;
        return result.batch;
      });
      promise.catch(() => undefined);
      return promise;
    };
    if (wanted.length === 0) await o.verified();
    let next = wanted.length > 0 ? start(0) : null;
    for (let j = 0; j < wanted.length; j++) {
      let raw;
      try {
        raw = await next!;
      } catch (error) {
        throw new RuntimeFailure('E_LAYER_READ', `layer file ${o.path}: batch ${wanted[j]} cannot be read (${(error as Error).message.split('\n')[0]})`, { hint: 'run `sonde check` on the snapshot' });
      }
      next = j + 1 < wanted.length ? start(j + 1) : null;
      if (raw.channelMeans.length !== raw.rows * o.channels) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${o.path}: channel_mean has ${raw.channelMeans.length / Math.max(1, raw.rows)} values per row, the manifest says ${o.channels}`);
      let activation: Float32Array | null = null;
      let activationFloat16: Uint16Array | undefined;
      if (o.wantActivation) {
        if (!raw.activation) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${o.path} lacks the activation column`);
        if (raw.activation.length !== raw.rows * o.elements) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer file ${o.path}: activation has ${raw.activation.length / Math.max(1, raw.rows)} values per row, the manifest shape says ${o.elements}`);
        if (raw.activation instanceof Uint16Array) {
          if (o.raw) activationFloat16 = raw.activation;
          else activation = float16ToFloat32(raw.activation);
        } else activation = raw.activation;
      }
      const batch: LayerBatch = { index: raw.index, rows: raw.rows, channelMeans: raw.channelMeans, activation, ...(activationFloat16 ? { activationFloat16 } : {}) };
      if (j === wanted.length - 1) await o.verified(); // no complete result from a damaged file
      yield o.range ? sliceBatch(batch, o.range, o.channels, o.elements, o.path) : batch;
    }
  } finally {
    file.close();
  }
}
