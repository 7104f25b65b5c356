import {
  Field, FixedSizeList, Float16, Float32, Int32, makeData, RecordBatch, Schema, Struct,
  type Data, type DataType,
} from 'apache-arrow';
import { float32ToFloat16 } from './float16.js';
import { HashingFileSink } from './arrow-sink.js';
import { ResumableFileWriter, scanRecordBatches } from './resume.js';
import type { ActivationDtype, KeepMode } from './manifest.js';
import { featureMeans, layoutGeometry, type LayoutGeometry, type TensorLayout } from '../graph/layout.js';

/** Field metadata key holding the per-stimulus shape (JSON array) of the `activation` column. */
export const SHAPE_METADATA_KEY = 'sonde.shape';

/** What a layer file holds. */
export interface LayerFileLayout {
  name: string;
  /** Per-stimulus shape, batch axis dropped. */
  shape: number[];
  dtype: ActivationDtype;
  keep: KeepMode;
  /** Feature axis and positions (src/graph/layout.ts); absent means features on axis 0 (snapshots before layouts). */
  layout?: TensorLayout;
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
  rows = 0;

  /**
   * @param path final file name (written as `path.partial` until `finish`).
   * @param layout what the file holds.
   * @param options `resumeAt`: continue an interrupted `path.partial` after its first `resumeAt` bytes
   *   (a checkpoint from `checkpoint()`); the rows already there count in `rows`. `resumeSha256`: the
   *   SHA-256 of those bytes at the checkpoint (`checkpointSha256()`), verified before resuming.
   * @throws RuntimeFailure when the file cannot be created, or the partial file does not hold complete
   *   record batches up to `resumeAt`, or those bytes do not have `resumeSha256`.
   */
  constructor(path: string, layout: LayerFileLayout, options: { resumeAt?: number; resumeSha256?: string } = {}) {
    this.layout = layout;
    this.schema = layerSchema(layout);
    this.geometry = layoutGeometry(layout.shape, layout.layout);
    this.channels = this.geometry.features;
    this.elements = this.channels * this.geometry.outer * this.geometry.inner;
    this.writer = new ResumableFileWriter();
    if (options.resumeAt === undefined) {
      this.sink = new HashingFileSink(path);
      this.writer.reset(this.sink, this.schema);
    } else {
      const scanned = scanRecordBatches(`${path}.partial`, options.resumeAt);
      this.sink = new HashingFileSink(path, { resumeAt: options.resumeAt, ...(options.resumeSha256 !== undefined ? { resumeSha256: options.resumeSha256 } : {}) });
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

  /**
   * Appends `rows` stimuli. `activation` holds rows × elements values, row-major (the runtime's output
   * buffer); `firstIndex` is the global index of the first row.
   */
  write(firstIndex: number, rows: number, activation: Float32Array): void {
    const index = new Int32Array(rows);
    for (let r = 0; r < rows; r++) index[r] = firstIndex + r;
    const means = featureMeans(activation, rows, this.geometry);
    const children: Data[] = [
      makeData({ type: new Int32(), length: rows, nullCount: 0, data: index }),
      fixedSizeList(new Float32(), this.channels, rows, means),
    ];
    if (this.layout.keep === 'full') {
      const values = activation.length === rows * this.elements ? activation : activation.subarray(0, rows * this.elements);
      children.push(this.layout.dtype === 'float16' ? fixedSizeList(new Float16(), this.elements, rows, float32ToFloat16(values)) : fixedSizeList(new Float32(), this.elements, rows, values));
    }
    const struct = makeData({ type: new Struct(this.schema.fields), length: rows, nullCount: 0, children });
    this.writer.write(new RecordBatch(this.schema, struct));
    this.rows += rows;
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

  /** Writes the footer, flushes, renames to the final name; returns hash and size. */
  finish(): { sha256: string; bytes: number; rows: number } {
    this.writer.finish();
    this.writer.close();
    return { ...this.sink.commit(), rows: this.rows };
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

function fixedSizeList<T extends Float32 | Float16>(item: T, size: number, rows: number, values: Float32Array | Uint16Array): Data {
  const child = makeData({ type: item as DataType, length: rows * size, nullCount: 0, data: values } as never) as Data;
  return makeData({ type: new FixedSizeList(size, new Field('item', item, false)), length: rows, nullCount: 0, child } as never) as Data;
}
