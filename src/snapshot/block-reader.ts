/**
 * Fast, bounded-memory reading of Sonde layer files. A layer file is an Arrow IPC file whose footer lists
 * the record batches (offset, metadata length, body length); with the schema Sonde writes (`index` int32,
 * `channel_mean` FixedSizeList<float32>, optional `activation` FixedSizeList<float32|float16>) the body
 * buffers come in a fixed order, so a batch is read with one positioned read per needed range and viewed
 * in place, without building Arrow vectors (Arrow IPC format: "Buffer layout" and "Encapsulated message
 * format" in the Arrow columnar specification). The next batch is read ahead on the thread pool while the
 * current one is consumed. Files of another schema are rejected so that callers fall back to the
 * general Arrow reader.
 */
import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { read as readAsync } from 'node:fs';
import { Footer, FileBlock } from 'apache-arrow/ipc/metadata/file';
import { Message } from 'apache-arrow/ipc/metadata/message';
import { Type } from 'apache-arrow';
import type { Schema } from 'apache-arrow';

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
    if (header.compression) throw new Error(`record batch ${i} of ${this.path} is compressed; Sonde writes uncompressed files`);
    const end = regions[wanted - 1]!.offset + regions[wanted - 1]!.length;
    const body = buffer && buffer.byteLength >= end ? buffer : new Uint8Array(Math.max(end, 8));
    await positionedRead(this.fd, body, 0, end, block.offset + block.metaDataLength);
    // region lengths are padded to 8 bytes: the views take exactly rows × width values
    const view = <T extends Float32Array | Uint16Array | Int32Array>(Ctor: { new (b: ArrayBuffer, o: number, l: number): T; BYTES_PER_ELEMENT: number }, region: { offset: number; length: number }, count: number, what: string): T => {
      if (count * Ctor.BYTES_PER_ELEMENT > region.length) throw new Error(`${what} of batch ${i} holds ${region.length} bytes, fewer than ${count} values`);
      return new Ctor(body.buffer as ArrayBuffer, body.byteOffset + region.offset, count);
    };
    const index = view(Int32Array, regions[1]!, rows, 'index');
    const channelMeans = view(Float32Array, regions[4]!, rows * this.widths.channels, 'channel_mean');
    let values: Float32Array | Uint16Array | null = null;
    if (wanted === 8) values = this.activationKind === 'float16' ? view(Uint16Array, regions[7]!, rows * this.widths.elements, 'activation') : view(Float32Array, regions[7]!, rows * this.widths.elements, 'activation');
    return { batch: { rows, index, channelMeans, activation: values }, buffer: body };
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
