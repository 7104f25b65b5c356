/**
 * Continuing an Arrow IPC file whose writer was killed. A file being written holds the 8-byte magic
 * and then complete record-batch messages (continuation marker, metadata length, flatbuffer metadata,
 * body); only the footer, written last, is missing. Given a byte length known to end at a message
 * boundary (a checkpoint), `scanRecordBatches` lists the messages' blocks and rows, and
 * `ResumableFileWriter` takes up writing after them with the same block list, so the footer it finally
 * writes — and so the whole file — is byte for byte what an uninterrupted writer would have produced.
 */
import { closeSync, openSync, readSync } from 'node:fs';
import { Message, MessageHeader, RecordBatchFileWriter, type Schema } from 'apache-arrow';
import { FileBlock } from 'apache-arrow/ipc/metadata/file';
import { RuntimeFailure } from '../errors.js';
import { compressBodyBuffers, compressionName } from './compression.js';
import type { HashingFileSink } from './arrow-sink.js';

/** The Arrow file magic and its padding: the first 8 bytes of every IPC file. */
const MAGIC = 'ARROW1';
const PREFIX_BYTES = 8;

/** What a checkpointed prefix of an IPC file holds. */
export interface ScannedBatches {
  /** One block per record batch, as the footer lists them. */
  blocks: FileBlock[];
  /** Rows of each batch. */
  rows: number[];
}

/**
 * Lists the record batches in the first `byteLength` bytes of the IPC file at `path`, reading only the
 * message headers (not the bodies).
 * @param path a file written by `RecordBatchFileWriter` (its footer may be missing).
 * @param byteLength the checkpoint: where the last complete message ends.
 * @returns the blocks and row counts, in file order.
 * @throws RuntimeFailure when the prefix does not start with the Arrow magic, a message is not a record
 *   batch, or the messages do not end exactly at `byteLength`.
 */
export function scanRecordBatches(path: string, byteLength: number): ScannedBatches {
  const fd = openSync(path, 'r');
  const fail = (why: string) => new RuntimeFailure('E_RESUME', `cannot resume ${path}: ${why}`, { hint: 'record again without --resume' });
  try {
    const head = new Uint8Array(PREFIX_BYTES);
    if (byteLength < PREFIX_BYTES || readSync(fd, head, 0, PREFIX_BYTES, 0) !== PREFIX_BYTES || String.fromCharCode(...head.subarray(0, 6)) !== MAGIC) {
      throw fail('it does not start with the Arrow file magic');
    }
    const blocks: FileBlock[] = [];
    const rows: number[] = [];
    const prefix = new Uint8Array(8);
    const view = new DataView(prefix.buffer);
    let at = PREFIX_BYTES;
    while (at < byteLength) {
      if (at + 8 > byteLength || readSync(fd, prefix, 0, 8, at) !== 8) throw fail(`a message header at byte ${at} is cut off`);
      const continuation = view.getInt32(0, true);
      const metadataLength = view.getInt32(4, true);
      if (continuation !== -1 || metadataLength <= 0 || at + 8 + metadataLength > byteLength) throw fail(`no record batch message at byte ${at}`);
      const metadata = new Uint8Array(metadataLength);
      if (readSync(fd, metadata, 0, metadataLength, at + 8) !== metadataLength) throw fail(`the message at byte ${at} is cut off`);
      let message: Message;
      try {
        message = Message.decode(metadata);
      } catch (error) {
        throw fail(`the message at byte ${at} cannot be decoded (${(error as Error).message.split('\n')[0]})`);
      }
      if (message.headerType !== MessageHeader.RecordBatch) throw fail(`the message at byte ${at} is not a record batch`);
      const bodyLength = message.bodyLength;
      blocks.push(new FileBlock(8 + metadataLength, bodyLength, at));
      rows.push(Number((message.header() as { length: number }).length));
      at += 8 + metadataLength + bodyLength;
    }
    if (at !== byteLength) throw fail(`the last record batch ends at byte ${at}, after the checkpoint at ${byteLength}`);
    return { blocks, rows };
  } finally {
    closeSync(fd);
  }
}

/**
 * A `RecordBatchFileWriter` that can take up an interrupted file: `resume` points it at a sink that
 * already holds `position` bytes (magic plus the listed batches) instead of writing the magic again.
 * Without `resume` it behaves exactly like its base class, except that compressed bodies (option
 * `compressionType`) are laid out by `compressBodyBuffers` with the length prefix the Arrow format
 * specifies (see compression.ts).
 */
export class ResumableFileWriter extends RecordBatchFileWriter {
  /** Frames made beforehand (`compressAsync`) for body buffers of the next batches, by their memory. */
  private readonly frames = new Map<ArrayBufferLike, Array<{ byteOffset: number; byteLength: number; frame: Uint8Array }>>();

  /** Hands over the frame of `raw`'s bytes, used (once) when a batch's body holds exactly those bytes. */
  addFrame(raw: Uint8Array, frame: Uint8Array): void {
    const list = this.frames.get(raw.buffer) ?? [];
    list.push({ byteOffset: raw.byteOffset, byteLength: raw.byteLength, frame });
    this.frames.set(raw.buffer, list);
  }

  /** How many body buffers were stored from a frame made beforehand (the rest were compressed in `write`). */
  framesUsed = 0;

  private takeFrame(raw: Uint8Array): Uint8Array | undefined {
    const list = this.frames.get(raw.buffer);
    const at = list?.findIndex((f) => f.byteOffset === raw.byteOffset && f.byteLength === raw.byteLength) ?? -1;
    if (at < 0) return undefined;
    const [found] = list!.splice(at, 1);
    if (list!.length === 0) this.frames.delete(raw.buffer);
    this.framesUsed += 1;
    return found!.frame;
  }

  /** Drops frames no batch took (a batch that failed). */
  dropFrames(): void {
    this.frames.clear();
  }

  protected override _compressBodyBuffers(buffers: ArrayBufferView[]): ReturnType<RecordBatchFileWriter['_compressBodyBuffers']> {
    const codec = this._compression ? compressionName(this._compression.type) : null;
    if (!codec) throw new Error(`unsupported Arrow compression codec ${String(this._compression?.type)}`);
    return compressBodyBuffers(codec, buffers, (raw) => this.takeFrame(raw));
  }

  /**
   * Continues after a checkpoint.
   * @param sink a sink opened with `resumeAt: position`.
   * @param schema the file's schema (the same the interrupted writer used).
   * @param position bytes already in the file.
   * @param blocks the record-batch blocks in those bytes (from `scanRecordBatches`).
   * @returns this.
   */
  resume(sink: HashingFileSink, schema: Schema, position: number, blocks: readonly FileBlock[]): this {
    this.reset(sink);
    this._schema = schema;
    this._started = true;
    this._position = position;
    this._recordBatchBlocks = [...blocks];
    this._dictionaryBlocks = [];
    return this;
  }
}
