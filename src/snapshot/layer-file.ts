import {
  Field, FixedSizeList, Float16, Float32, Int32, makeData, RecordBatch, Schema, Struct,
  type Data, type DataType,
} from 'apache-arrow';
import { float32ToFloat16 } from './float16.js';
import { HashingFileSink } from './arrow-sink.js';
import { ResumableFileWriter, scanRecordBatches } from './resume.js';
import { arrowCompressionType, compressAsync, registerArrowCodecs, type LayerCompression } from './compression.js';
import { LayerBlockFile } from './block-reader.js';
import type { ActivationDtype, KeepMode } from './manifest.js';
import { layoutGeometry, type LayoutGeometry, type TensorLayout } from '../graph/layout.js';
import { float16Pass, float32Pass, countHalfNonFinite, countNonFiniteValues } from './activation-pass.js';
import type { BackgroundWriter } from './background-writer.js';

/** Field metadata key holding the per-stimulus shape (JSON array) of the `activation` column. */
export const SHAPE_METADATA_KEY = 'sonde.shape';

/** Activation arrays from this size on are compressed beforehand on the thread pool (`precompress`). */
const PRECOMPRESS_BYTES = 64 * 2 ** 10;

/** What a layer file holds. */
export interface LayerFileLayout {
  name: string;
  /** Per-stimulus shape, batch axis dropped. */
  shape: number[];
  dtype: ActivationDtype;
  keep: KeepMode;
  /** Feature axis and positions (src/graph/layout.ts); absent means features on axis 0 (snapshots before layouts). */
  layout?: TensorLayout;
  /** Arrow IPC buffer compression of the record batches (compression.ts); absent: `none`. */
  compression?: LayerCompression;
}

/** What a finished layer file is: its SHA-256, size and rows, and for a full layer its channel-means file. */
export interface LayerFileResult {
  sha256: string;
  bytes: number;
  rows: number;
  /** The channel-means file written beside a full layer (`meansFileName`); absent for keep = channels. */
  means?: { sha256: string; bytes: number };
}

/**
 * The channel-means file of a full layer file: `layers/003-conv.arrow` → `layers/003-conv.means.arrow`.
 * It holds the layer file's `index` and `channel_mean` columns only (the schema of a keep = channels
 * layer file, uncompressed), so that channel means are read and verified without touching activation
 * bytes.
 */
export function meansFileName(file: string): string {
  return `${file.endsWith('.arrow') ? file.slice(0, -'.arrow'.length) : file}.means.arrow`;
}

/** Target size of one record batch of a channel-means file (rows × C × 4 bytes). */
const MEANS_BATCH_BYTES = 1 << 20;

/** The manifest fields of a finished layer file (`means` with its file name when there is one). */
export function manifestFields(file: string, result: LayerFileResult): { sha256: string; bytes: number; rows: number; means?: { file: string; sha256: string; bytes: number } } {
  return { sha256: result.sha256, bytes: result.bytes, rows: result.rows, ...(result.means ? { means: { file: meansFileName(file), ...result.means } } : {}) };
}

/** Channels (features) of a per-stimulus shape under its layout: C of C×H×W, D of tokens T×D, the length of a vector. */
export function channelCount(shape: readonly number[], layout?: TensorLayout | null): number {
  return shape.length === 0 ? 1 : layoutGeometry(shape, layout).features;
}

/** Positions per channel (H·W for a feature map, T for tokens, 1 for a vector). */
export function spatialSize(shape: readonly number[], layout?: TensorLayout | null): number {
  const g = layoutGeometry(shape, layout);
  return g.outer * g.inner;
}

/** The Arrow schema of a layer file: `index` int32, `channel_mean` FixedSizeList<float32>[C], and `activation` unless keep = channels. */
export function layerSchema(layout: LayerFileLayout): Schema {
  const channels = channelCount(layout.shape, layout.layout);
  const elements = layout.shape.reduce((a, b) => a * b, 1);
  const fields: Field[] = [
    new Field('index', new Int32(), false),
    new Field('channel_mean', new FixedSizeList(channels, new Field('item', new Float32(), false)), false),
  ];
  if (layout.keep === 'full') {
    const item = layout.dtype === 'float16' ? new Float16() : new Float32();
    fields.push(
      new Field('activation', new FixedSizeList(elements, new Field('item', item, false)), false, new Map([[SHAPE_METADATA_KEY, JSON.stringify(layout.shape)]])),
    );
  }
  return new Schema(fields, new Map([['sonde.layer', layout.name], ['sonde.format', '1']]));
}

/**
 * Writes one layer's Arrow IPC file, batch by batch. Activation buffers are handed to Arrow as views,
 * not copied (float16 storage converts once). Channel means are computed here, in doubles.
 */
export class LayerFileWriter {
  readonly layout: LayerFileLayout;
  private readonly schema: Schema;
  private readonly sink: HashingFileSink;
  private readonly writer: ResumableFileWriter;
  private readonly channels: number;
  private readonly geometry: LayoutGeometry;
  private readonly elements: number;
  private readonly path: string;
  rows = 0;

  /**
   * @param path final file name (written as `path.partial` until `finish`).
   * @param layout what the file holds.
   * @param options `resumeAt`: continue an interrupted `path.partial` after its first `resumeAt` bytes
   *   (a checkpoint from `checkpoint()`); the rows already there count in `rows`. `resumeSha256`: the
   *   SHA-256 of those bytes at the checkpoint (`checkpointSha256()`), verified before resuming.
   *   `background`: write and hash on that writer's thread (background-writer.ts); `rowsPerWrite`: rows
   *   each `write` will usually bring (the batch), from which that writer judges whether the file's
   *   writes are large enough to go to the disk directly (disk/write-mode.ts).
   * @throws RuntimeFailure when the file cannot be created, or the partial file does not hold complete
   *   record batches up to `resumeAt`, or those bytes do not have `resumeSha256`.
   */
  constructor(path: string, layout: LayerFileLayout, options: { resumeAt?: number; resumeSha256?: string; background?: BackgroundWriter; rowsPerWrite?: number } = {}) {
    this.layout = layout;
    this.path = path;
    this.schema = layerSchema(layout);
    this.geometry = layoutGeometry(layout.shape, layout.layout);
    this.channels = this.geometry.features;
    this.elements = this.channels * this.geometry.outer * this.geometry.inner;
    const compressionType = arrowCompressionType(layout.compression ?? 'none');
    if (compressionType !== null) registerArrowCodecs();
    this.writer = new ResumableFileWriter(compressionType !== null ? { compressionType } : undefined);
    // bytes one write of `rowsPerWrite` rows brings, uncompressed (what the direct-write choice looks at)
    const writeBytes = options.rowsPerWrite === undefined ? undefined : options.rowsPerWrite * (layout.keep === 'full' ? this.elements * (layout.dtype === 'float16' ? 2 : 4) : this.channels * 4);
    const background = options.background ? { background: options.background, ...(writeBytes !== undefined ? { writeBytes } : {}) } : {};
    if (options.resumeAt === undefined) {
      this.sink = new HashingFileSink(path, background);
      this.writer.reset(this.sink, this.schema);
    } else {
      const scanned = scanRecordBatches(`${path}.partial`, options.resumeAt);
      this.sink = new HashingFileSink(path, { resumeAt: options.resumeAt, ...(options.resumeSha256 !== undefined ? { resumeSha256: options.resumeSha256 } : {}), ...background });
      this.writer.resume(this.sink, this.schema, options.resumeAt, scanned.blocks);
      this.rows = scanned.rows.reduce((a, b) => a + b, 0);
    }
  }

  /** Flushes the batches written so far to disk and returns the file's byte length (a resume point). */
  checkpoint(): number {
    this.sink.sync();
    return this.sink.byteLength;
  }

  /** SHA-256 (hex) of the file's bytes so far: store it with `checkpoint()`'s length to verify a resume. */
  checkpointSha256(): string {
    return this.sink.prefixSha256();
  }

  /** Batches whose values were stored from a frame `precompress` made. */
  get batchesCompressedAhead(): number {
    return this.writer.framesUsed;
  }

  /**
   * Compresses the activation values `write` will store for `rows` rows on the thread pool, so that the
   * next `write` of the same array finds their frame made (compressing is most of the cost of a
   * compressed batch; the layers of a batch are compressed side by side this way). Nothing to do (resolves
   * at once) without compression, for channel-means layers, for float32 values of a float16 layer
   * (converted in `write` itself) and for small arrays. `activation` must not change or move until the
   * promise settles.
   */
  async precompress(activation: Float32Array | Uint16Array, rows: number): Promise<void> {
    const codec = this.layout.compression ?? 'none';
    if (codec === 'none' || this.layout.keep !== 'full') return;
    const half = activation instanceof Uint16Array;
    if (this.layout.dtype === 'float16' && !half) return;
    const count = rows * this.elements;
    const values = activation.length === count ? activation : activation.subarray(0, count);
    if (values.byteLength < PRECOMPRESS_BYTES) return;
    const raw = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
    this.writer.addFrame(raw, await compressAsync(codec, raw));
  }

  /**
   * Appends `rows` stimuli. `activation` holds rows × elements values, row-major (the runtime's output
   * buffer): float32 values, or — for a float16 layout only — float16 bit patterns already converted
   * (e.g. by a Cast in the graph). `firstIndex` is the global index of the first row. Channel means and
   * the non-finite count come from one pass over the values (activation-pass.ts); means of float32
   * values are taken before any float16 rounding, means of float16 bits of the stored values.
   * @param donate the caller gives up `activation`'s memory: with a background writer its bytes move to
   *   the writer thread without a copy, and the array must not be used again.
   * @param means channel means computed elsewhere (at least rows × C values, e.g. by the runtime from the
   *   float32 tensor before a float16 cast); then the values are only scanned for NaN/±Infinity.
   * @returns how many stored values are NaN or ±Infinity (for float16 storage: after rounding, so
   *   float32 values of magnitude ≥ 65520 count).
   */
  write(firstIndex: number, rows: number, activation: Float32Array | Uint16Array, donate = false, means?: Float32Array): number {
    const index = new Int32Array(rows);
    for (let r = 0; r < rows; r++) index[r] = firstIndex + r;
    const count = rows * this.elements;
    const half = activation instanceof Uint16Array;
    if (half && this.layout.dtype !== 'float16') throw new RangeError(`${this.layout.name}: float16 bits given for a ${this.layout.dtype} layer`);
    if (means && means.length < rows * this.channels) throw new RangeError(`${this.layout.name}: ${means.length} channel means for ${rows} rows of ${this.channels} channels`);
    const given = means ? { means: means.length === rows * this.channels ? means : means.slice(0, rows * this.channels), nonFinite: half ? countHalfNonFinite(activation, 0, count) : countNonFiniteValues(activation, count) } : null;
    const pass = given ?? (half ? float16Pass(activation, rows, this.geometry) : float32Pass(activation, rows, this.geometry));
    let nonFinite = pass.nonFinite;
    const children: Data[] = [
      makeData({ type: new Int32(), length: rows, nullCount: 0, data: index }),
      fixedSizeList(new Float32(), this.channels, rows, pass.means),
    ];
    if (this.layout.keep === 'full') {
      const values = activation.length === count ? activation : activation.subarray(0, count);
      if (this.layout.dtype === 'float16' && !half) {
        const bits = float32ToFloat16(values as Float32Array);
        nonFinite = countHalfNonFinite(bits);
        this.sink.donate(bits.buffer);
        children.push(fixedSizeList(new Float16(), this.elements, rows, bits));
      } else {
        if (donate) this.sink.donate(activation.buffer);
        children.push(fixedSizeList(half ? new Float16() : new Float32(), this.elements, rows, values));
      }
    }
    const struct = makeData({ type: new Struct(this.schema.fields), length: rows, nullCount: 0, children });
    try {
      this.writer.write(new RecordBatch(this.schema, struct));
    } finally {
      this.sink.undonate();
      this.writer.dropFrames();
    }
    this.rows += rows;
    return nonFinite;
  }

  /**
   * Appends `rows` stimuli given as stored columns, without recomputing anything (used to re-batch
   * existing files: channel means stay as recorded, float16 activations stay bit-identical).
   * @param firstIndex global index of the first row (rows get consecutive indices).
   * @param channelMeans rows × C values.
   * @param activation rows × E values (float32 values, or float16 bit patterns for a float16 layout);
   *   null exactly when the layout keeps channel means only.
   * @throws RangeError when a length or the activation's storage type does not fit the layout.
   */
  writeColumns(firstIndex: number, rows: number, channelMeans: Float32Array, activation: Float32Array | Uint16Array | null): void {
    if (channelMeans.length !== rows * this.channels) throw new RangeError(`${this.layout.name}: ${channelMeans.length} channel means for ${rows} rows of ${this.channels} channels`);
    const index = new Int32Array(rows);
    for (let r = 0; r < rows; r++) index[r] = firstIndex + r;
    const children: Data[] = [makeData({ type: new Int32(), length: rows, nullCount: 0, data: index }), fixedSizeList(new Float32(), this.channels, rows, channelMeans)];
    if (this.layout.keep === 'full') {
      const wanted = this.layout.dtype === 'float16' ? Uint16Array : Float32Array;
      if (!(activation instanceof wanted) || activation.length !== rows * this.elements) throw new RangeError(`${this.layout.name}: activation must be ${rows * this.elements} ${this.layout.dtype} values`);
      children.push(fixedSizeList(this.layout.dtype === 'float16' ? new Float16() : new Float32(), this.elements, rows, activation));
    } else if (activation !== null) throw new RangeError(`${this.layout.name}: keeps channel means only, got activations`);
    const struct = makeData({ type: new Struct(this.schema.fields), length: rows, nullCount: 0, children });
    this.writer.write(new RecordBatch(this.schema, struct));
    this.rows += rows;
  }

  /**
   * Writes the footer, flushes, renames to the final name; for a full layer then writes its channel-means
   * file (`meansFileName`) from the finished file's own `index` and `channel_mean` buffers (so it also
   * holds the rows written before a resume). Returns hashes and sizes.
   */
  finish(): LayerFileResult {
    this.writer.finish();
    this.writer.close();
    const result = { ...this.sink.commit(), rows: this.rows };
    if (this.layout.keep !== 'full') return result;
    return { ...result, means: writeMeansFile(this.path, this.layout) };
  }

  /** Stops writing and keeps `path.partial` as it is on disk (a later resume truncates it to its checkpoint). */
  suspend(): void {
    this.sink.suspend();
  }

  /** Abandons the file (deletes the temporary). */
  discard(): void {
    this.sink.discard();
  }
}

/**
 * Writes `meansFileName(path)` from the index and channel means of the finished layer file at `path`,
 * in record batches of about 1 MiB, uncompressed.
 */
function writeMeansFile(path: string, layout: LayerFileLayout): { sha256: string; bytes: number } {
  const source = LayerBlockFile.open(path);
  if (!source) throw new Error(`${path} is not in Sonde's layer layout`);
  const writer = new LayerFileWriter(meansFileName(path), { name: layout.name, shape: layout.shape, dtype: layout.dtype, keep: 'channels', ...(layout.layout ? { layout: layout.layout } : {}) });
  try {
    const channels = source.widths.channels;
    const capacity = Math.max(1, Math.floor(MEANS_BATCH_BYTES / (4 * Math.max(1, channels))));
    const means = new Float32Array(capacity * channels);
    let filled = 0;
    let first = 0;
    const flush = () => {
      if (filled > 0) writer.writeColumns(first, filled, means.subarray(0, filled * channels), null);
      first += filled;
      filled = 0;
    };
    for (let b = 0; b < source.count; b++) {
      const batch = source.readMeansSync(b);
      for (let r = 0; r < batch.rows; r++) {
        // rows keep their global index: consecutive in a layer file (checked again by `sonde check`)
        if (filled === 0) first = batch.index[r]!;
        else if (batch.index[r] !== first + filled) {
          flush();
          first = batch.index[r]!;
        }
        means.set(batch.channelMeans.subarray(r * channels, (r + 1) * channels), filled * channels);
        if (++filled === capacity) flush();
      }
    }
    flush();
    const { sha256, bytes } = writer.finish();
    return { sha256, bytes };
  } catch (error) {
    writer.discard();
    throw error;
  } finally {
    source.close();
  }
}

function fixedSizeList<T extends Float32 | Float16>(item: T, size: number, rows: number, values: Float32Array | Uint16Array): Data {
  const child = makeData({ type: item as DataType, length: rows * size, nullCount: 0, data: values } as never) as Data;
  return makeData({ type: new FixedSizeList(size, new Field('item', item, false)), length: rows, nullCount: 0, child } as never) as Data;
}
