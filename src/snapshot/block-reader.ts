/**
 * Fast, bounded-memory reading of Sonde layer files. A layer file is an Arrow IPC file whose footer lists
 * the record batches (offset, metadata length, body length); with the schema Sonde writes (`index` int32,
 * `channel_mean` FixedSizeList<float32>, optional `activation` FixedSizeList<float32|float16>) the body
 * buffers come in a fixed order, so a batch is read with one positioned read per needed range and viewed
 * in place, without building Arrow vectors (Arrow IPC format: "Buffer layout" and "Encapsulated message
 * format" in the Arrow columnar specification). The next batch is read ahead on the thread pool while the
 * current one is consumed. Files of another schema are rejected so that callers fall back to the
 * general Arrow reader.
 *
 * Compressed batches (Arrow's `BodyCompression`, LZ4 frame or ZSTD; see compression.ts) are read the
 * same way: only the byte ranges of the buffers asked for are read, and each is decompressed on the
 * thread pool (as part of the read-ahead). With `activation` false neither reads nor decompresses the
 * activation buffer.
 */
import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { read as readAsync } from 'node:fs';
import { Footer, FileBlock } from 'apache-arrow/ipc/metadata/file';
import { Message } from 'apache-arrow/ipc/metadata/message';
import { Type } from 'apache-arrow';
import type { Schema } from 'apache-arrow';
import { compressionName, decodeBuffer, decodeBufferSync, type LayerCompression } from './compression.js';

/** One batch as views: rows, global indices, channel means, activations (float32 or float16 bits). */
export interface RawBatch {
  rows: number;
  index: Int32Array;
  channelMeans: Float32Array;
  activation: Float32Array | Uint16Array | null;
}

const MAGIC = 'ARROW1';

/** An open layer file: its schema and record batch blocks. */
export class LayerBlockFile {
  private constructor(
    readonly path: string,
    private fd: number,
    readonly schema: Schema,
    readonly blocks: FileBlock[],
    readonly activationKind: 'float32' | 'float16' | null,
    /** FixedSizeList widths of `channel_mean` and `activation` (0 when absent). */
    readonly widths: { channels: number; elements: number },
  ) {}

  /**
   * Opens `path` and reads its footer. Returns null when the file is not in Sonde's layer layout
   * (the caller then uses the general reader); throws when it is not an Arrow file at all.
   */
  static open(path: string): LayerBlockFile | null {
    const fd = openSync(path, 'r');
    try {
      const size = fstatSync(fd).size;
      const tail = Buffer.alloc(10);
      if (size < 18 || readSync(fd, tail, 0, 10, size - 10) !== 10 || tail.subarray(4).toString('latin1') !== MAGIC) {
        closeSync(fd);
        throw new Error('not an Arrow IPC file (no ARROW1 footer magic)');
      }
      const footerLength = tail.readInt32LE(0);
      if (footerLength <= 0 || footerLength > size - 18) {
        closeSync(fd);
        throw new Error(`bad Arrow footer length ${footerLength}`);
      }
      const footerBytes = new Uint8Array(footerLength);
      readSync(fd, footerBytes, 0, footerLength, size - 10 - footerLength);
      const footer = Footer.decode(footerBytes);
      const fields = footer.schema.fields;
      const fsl = (i: number) => fields[i]?.type.typeId === Type.FixedSizeList;
      const child = (i: number) => (fields[i]!.type as unknown as { children: Array<{ type: { typeId: number; precision?: number } }> }).children[0]!.type;
      const layout = fields.length >= 2 && fields[0]!.name === 'index' && fields[0]!.type.typeId === Type.Int && fields[1]!.name === 'channel_mean' && fsl(1) && child(1).typeId === Type.Float && child(1).precision === 1;
      let activationKind: 'float32' | 'float16' | null = null;
      if (fields.length === 3) {
        if (fields[2]!.name !== 'activation' || !fsl(2) || child(2).typeId !== Type.Float) return close(fd);
        activationKind = child(2).precision === 1 ? 'float32' : child(2).precision === 0 ? 'float16' : null;
        if (activationKind === null) return close(fd);
      } else if (fields.length !== 2) return close(fd);
      if (!layout) return close(fd);
      for (const block of footer.recordBatches()) {
        if (block.offset + block.metaDataLength + block.bodyLength > size) {
          closeSync(fd);
          throw new Error(`record batch at byte ${block.offset} runs past the end of the file (truncated?)`);
        }
      }
      const width = (i: number) => (fields[i] ? (fields[i]!.type as unknown as { listSize: number }).listSize : 0);
      return new LayerBlockFile(path, fd, footer.schema, [...footer.recordBatches()], activationKind, { channels: width(1), elements: activationKind ? width(2) : 0 });
    } catch (error) {
      try {
        closeSync(fd);
      } catch {
        // already closed
      }
      throw error;
    }
  }

  /** Rows of batch `i`, from its metadata only (cached). */
  async rows(i: number): Promise<number> {
    const cached = this.rowCache.get(i);
    if (cached !== undefined) return cached;
    const header = await this.header(i);
    this.rowCache.set(i, header.length);
    return header.length;
  }

  private readonly rowCache = new Map<number, number>();

  private async header(i: number) {
    const block = this.blocks[i]!;
    const meta = new Uint8Array(block.metaDataLength);
    await positionedRead(this.fd, meta, 0, meta.length, block.offset);
    return this.decodeHeader(i, meta);
  }

  private headerSync(i: number) {
    const block = this.blocks[i]!;
    const meta = new Uint8Array(block.metaDataLength);
    readFully(this.fd, meta, block.offset);
    return this.decodeHeader(i, meta);
  }

  private decodeHeader(i: number, meta: Uint8Array) {
    // encapsulated message: 0xFFFFFFFF continuation, int32 flatbuffer length, flatbuffer, padding
    const view = new DataView(meta.buffer, meta.byteOffset, meta.byteLength);
    let start = 4;
    let length = view.getInt32(0, true);
    if (length === -1) {
      length = view.getInt32(4, true);
      start = 8;
    }
    const message = Message.decode(meta.subarray(start, start + length));
    if (!message.isRecordBatch()) throw new Error(`block ${i} of ${this.path} is not a record batch`);
    return message.header();
  }

  /** The codec of batch `i` (`none` for plain buffers). @throws Error for a codec Sonde does not read. */
  private codecOf(i: number, header: { compression: { type: number } | null }): LayerCompression {
    if (!header.compression) return 'none';
    const name = compressionName(header.compression.type);
    if (!name) throw new Error(`record batch ${i} of ${this.path} uses compression codec ${header.compression.type}, which Sonde does not read (LZ4 frame and ZSTD only)`);
    return name;
  }

  /** How batch `i` is stored (`none`, `lz4`, `zstd`), from its metadata only. */
  compressionOf(i: number): LayerCompression {
    return this.codecOf(i, this.headerSync(i));
  }

  /** Number of record batches. */
  get count(): number {
    return this.blocks.length;
  }

  /**
   * Reads batch `i`. With `activation` false only the index and channel-mean ranges are read. Pass a
   * `buffer` to reuse memory (the returned views then live only until the buffer is reused).
   */
  async read(i: number, activation: boolean, buffer?: Uint8Array): Promise<{ batch: RawBatch; buffer: Uint8Array }> {
    const block = this.blocks[i]!;
    const header = await this.header(i);
    const rows = header.length;
    const regions = header.buffers;
    const wanted = activation && this.activationKind ? 8 : 5;
    if (regions.length < wanted) throw new Error(`record batch ${i} of ${this.path} has ${regions.length} buffers, expected ${wanted}`);
    const codec = this.codecOf(i, header);
    const end = regions[wanted - 1]!.offset + regions[wanted - 1]!.length;
    if (end > block.bodyLength) throw new Error(`record batch ${i} of ${this.path} lists buffers up to byte ${end} of a ${block.bodyLength}-byte body`);
    const body = buffer && buffer.byteLength >= end ? buffer : new Uint8Array(Math.max(end, 8));
    await positionedRead(this.fd, body, 0, end, block.offset + block.metaDataLength);
    const bytes = (r: number): Uint8Array => body.subarray(regions[r]!.offset, regions[r]!.offset + regions[r]!.length);
    const limits = this.limits(rows);
    const [indexBytes, meanBytes, valueBytes] = codec === 'none'
      ? [bytes(1), bytes(4), wanted === 8 ? bytes(7) : null]
      : await Promise.all([decodeBuffer(codec, bytes(1), limits.index), decodeBuffer(codec, bytes(4), limits.means), wanted === 8 ? decodeBuffer(codec, bytes(7), limits.activation) : Promise.resolve(null)]);
    return { batch: this.viewBatch(i, rows, indexBytes, meanBytes, valueBytes), buffer: body };
  }

  /**
   * Reads the index and channel means of batch `i` synchronously (never the activation buffer): what a
   * writer reads back from a file it has just finished.
   */
  readMeansSync(i: number): RawBatch {
    const block = this.blocks[i]!;
    const header = this.headerSync(i);
    const regions = header.buffers;
    if (regions.length < 5) throw new Error(`record batch ${i} of ${this.path} has ${regions.length} buffers, expected 5`);
    const codec = this.codecOf(i, header);
    const end = regions[4]!.offset + regions[4]!.length;
    if (end > block.bodyLength) throw new Error(`record batch ${i} of ${this.path} lists buffers up to byte ${end} of a ${block.bodyLength}-byte body`);
    const body = new Uint8Array(Math.max(end, 8));
    readFully(this.fd, body.subarray(0, end), block.offset + block.metaDataLength);
    const bytes = (r: number): Uint8Array => body.subarray(regions[r]!.offset, regions[r]!.offset + regions[r]!.length);
    const limits = this.limits(header.length);
    const decode = (r: number, limit: number) => (codec === 'none' ? bytes(r) : decodeBufferSync(codec, bytes(r), limit));
    return this.viewBatch(i, header.length, decode(1, limits.index), decode(4, limits.means), null);
  }

  /** The most bytes each decompressed buffer of a batch of `rows` may hold (its values, padded to 64 bytes). */
  private limits(rows: number): { index: number; means: number; activation: number } {
    const padded = (bytes: number) => Math.ceil(bytes / 64) * 64;
    return { index: padded(rows * 4), means: padded(rows * this.widths.channels * 4), activation: padded(rows * this.widths.elements * (this.activationKind === 'float16' ? 2 : 4)) };
  }

  /** Typed views of a batch's buffers (region lengths are padded to 8 bytes: the views take exactly rows × width values). */
  private viewBatch(i: number, rows: number, indexBytes: Uint8Array, meanBytes: Uint8Array, valueBytes: Uint8Array | null): RawBatch {
    const view = <T extends Float32Array | Uint16Array | Int32Array>(Ctor: { new (b: ArrayBuffer, o: number, l: number): T; BYTES_PER_ELEMENT: number }, bytes: Uint8Array, count: number, what: string): T => {
      if (count * Ctor.BYTES_PER_ELEMENT > bytes.byteLength) throw new Error(`${what} of batch ${i} holds ${bytes.byteLength} bytes, fewer than ${count} values`);
      // a decompressed buffer may start anywhere: copy it when it is not aligned for the view
      const aligned = bytes.byteOffset % Ctor.BYTES_PER_ELEMENT === 0 ? bytes : bytes.slice(0, count * Ctor.BYTES_PER_ELEMENT);
      return new Ctor(aligned.buffer as ArrayBuffer, aligned.byteOffset, count);
    };
    const index = view(Int32Array, indexBytes, rows, 'index');
    const channelMeans = view(Float32Array, meanBytes, rows * this.widths.channels, 'channel_mean');
    let values: Float32Array | Uint16Array | null = null;
    if (valueBytes) values = this.activationKind === 'float16' ? view(Uint16Array, valueBytes, rows * this.widths.elements, 'activation') : view(Float32Array, valueBytes, rows * this.widths.elements, 'activation');
    return { rows, index, channelMeans, activation: values };
  }

  close(): void {
    if (this.fd >= 0) closeSync(this.fd);
    this.fd = -1;
  }
}

function close(fd: number): null {
  closeSync(fd);
  return null;
}

function readFully(fd: number, target: Uint8Array, position: number): void {
  let done = 0;
  while (done < target.byteLength) {
    const bytes = readSync(fd, target, done, target.byteLength - done, position + done);
    if (bytes === 0) throw new Error(`unexpected end of file at byte ${position + done}`);
    done += bytes;
  }
}

function positionedRead(fd: number, target: Uint8Array, offset: number, length: number, position: number): Promise<void> {
  return new Promise((resolve, reject) => {
    const step = (done: number): void => {
      if (done >= length) return resolve();
      readAsync(fd, target, offset + done, length - done, position + done, (error, bytes) => {
        if (error) return reject(error);
        if (bytes === 0) return reject(new Error(`unexpected end of file at byte ${position + done}`));
        step(done + bytes);
      });
    };
    step(0);
  });
}
