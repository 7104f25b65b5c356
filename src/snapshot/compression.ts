/**
 * Compressed layer files: Arrow IPC's own buffer compression (the `BodyCompression` field of a
 * RecordBatch message, codecs LZ4_FRAME and ZSTD, method BUFFER). Every body buffer of a compressed
 * batch is an int64 little-endian uncompressed length followed by the codec's frame; a length of −1
 * means the bytes follow as they are (compression did not pay), and an empty buffer stays empty with
 * no prefix (Arrow columnar format specification, "Compression" under "IPC Format"; Schema.fbs /
 * Message.fbs `BodyCompression`). Any Arrow implementation with the codec reads these files
 * (nodejs-polars, pyarrow, Arrow C++), and so does `tools/python/sonde_read.py` with python3-lz4 /
 * python3-zstandard.
 *
 * The codecs come from two npm packages whose native binaries ship inside their platform packages:
 * `lz4-napi` (LZ4 frame format) and `@toondepauw/node-zstd` (Zstandard). They are loaded on first use,
 * so a platform without them can still read and write uncompressed snapshots; using a codec there fails
 * with one line naming the package.
 */
import { createRequire } from 'node:module';
import { CompressionType, compressionRegistry } from 'apache-arrow';
import { BufferRegion } from 'apache-arrow/ipc/metadata/message';
import { RuntimeFailure, UsageError } from '../errors.js';
import { readManifest } from './manifest.js';

/** How a layer file's record batches are stored: `none` (plain buffers), `lz4` (LZ4 frame) or `zstd`. */
export type LayerCompression = 'none' | 'lz4' | 'zstd';

/** Every accepted value, in the order the option lists them. */
export const LAYER_COMPRESSIONS: readonly LayerCompression[] = ['none', 'lz4', 'zstd'];

/** Zstandard level used for writing: 1, the fastest standard level (the benchmark compares it with LZ4). */
export const ZSTD_LEVEL = 1;

/** The int64 length in front of every compressed buffer; −1: stored as is. */
export const LENGTH_PREFIX_BYTES = 8;
export const UNCOMPRESSED_LENGTH = -1n;

interface Lz4Module {
  compressFrameSync(data: Buffer): Buffer;
  compressFrame(data: Buffer): Promise<Buffer>;
  decompressFrameSync(data: Buffer): Buffer;
  decompressFrame(data: Uint8Array): Promise<Buffer>;
}
interface ZstdModule {
  Encoder: new (level: number) => { encodeSync(data: Buffer): Buffer; encode(data: Buffer): Promise<Buffer> };
  Decoder: new () => { decodeSync(data: Buffer): Buffer; decode(data: Buffer): Promise<Buffer> };
}

const require = createRequire(import.meta.url);
let lz4: Lz4Module | null = null;
let zstd: { module: ZstdModule; encoder: { encodeSync(data: Buffer): Buffer }; decoder: { decodeSync(data: Buffer): Buffer; decode(data: Buffer): Promise<Buffer> } } | null = null;

function loadLz4(): Lz4Module {
  if (!lz4) {
    try {
      lz4 = require('lz4-napi') as Lz4Module;
    } catch (error) {
      throw new RuntimeFailure('E_CODEC', `the LZ4 codec (npm package lz4-napi) cannot be loaded on this platform (${(error as Error).message.split('\n')[0]})`, {
        hint: 'reinstall with `npm install`, or record with --compress none / zstd',
      });
    }
  }
  return lz4;
}

function loadZstd(): NonNullable<typeof zstd> {
  if (!zstd) {
    try {
      const module = require('@toondepauw/node-zstd') as ZstdModule;
      zstd = { module, encoder: new module.Encoder(ZSTD_LEVEL), decoder: new module.Decoder() };
    } catch (error) {
      throw new RuntimeFailure('E_CODEC', `the ZSTD codec (npm package @toondepauw/node-zstd) cannot be loaded on this platform (${(error as Error).message.split('\n')[0]})`, {
        hint: 'reinstall with `npm install`, or record with --compress none / lz4',
      });
    }
  }
  return zstd;
}

function asBuffer(data: Uint8Array): Buffer {
  return Buffer.isBuffer(data) ? data : Buffer.from(data.buffer, data.byteOffset, data.byteLength);
}

/** Arrow's codec id of a compression, or null for `none`. */
export function arrowCompressionType(compression: LayerCompression): CompressionType | null {
  return compression === 'lz4' ? CompressionType.LZ4_FRAME : compression === 'zstd' ? CompressionType.ZSTD : null;
}

/** Sonde's name of an Arrow codec id (`lz4`, `zstd`), or null for an id Sonde does not read. */
export function compressionName(type: number): Exclude<LayerCompression, 'none'> | null {
  return type === CompressionType.LZ4_FRAME ? 'lz4' : type === CompressionType.ZSTD ? 'zstd' : null;
}

/**
 * Parses a `--compress` value.
 * @throws UsageError naming the value and the choices.
 */
export function parseCompression(value: string, option = '--compress'): LayerCompression {
  if ((LAYER_COMPRESSIONS as readonly string[]).includes(value)) return value as LayerCompression;
  throw new UsageError('E_COMPRESS', `${option} must be one of ${LAYER_COMPRESSIONS.join(', ')}, got "${value}"`, { hint: `${option} zstd (smallest), lz4, or none` });
}

/**
 * The codec of the snapshot in `folder` (what a `--resume` without `compress` continues with): its
 * first own layer's, `none` when there is no readable manifest (the folder's state is reported when it
 * is opened).
 */
export function recordedCompression(folder: string): LayerCompression {
  try {
    return readManifest(folder).layers.find((l) => l.from !== 'baseline')?.compression ?? 'none';
  } catch {
    return 'none';
  }
}

/** Compresses one buffer with the codec (a complete LZ4 frame or Zstandard frame). */
export function compressSync(compression: Exclude<LayerCompression, 'none'>, data: Uint8Array): Uint8Array {
  return compression === 'lz4' ? loadLz4().compressFrameSync(asBuffer(data)) : loadZstd().encoder.encodeSync(asBuffer(data));
}

/**
 * Compresses one buffer on the thread pool, giving the same frame as `compressSync` (a recording
 * compresses the large buffers of a batch side by side while its thread goes on). The buffer must not
 * change or move until the promise settles.
 */
export function compressAsync(compression: Exclude<LayerCompression, 'none'>, data: Uint8Array): Promise<Uint8Array> {
  // an encoder of its own per call: calls run concurrently
  return compression === 'lz4' ? loadLz4().compressFrame(asBuffer(data)) : new (loadZstd().module.Encoder)(ZSTD_LEVEL).encode(asBuffer(data));
}

/** Decompresses one frame (synchronously, on the calling thread). */
export function decompressSync(compression: Exclude<LayerCompression, 'none'>, frame: Uint8Array): Uint8Array {
  return compression === 'lz4' ? loadLz4().decompressFrameSync(asBuffer(frame)) : loadZstd().decoder.decodeSync(asBuffer(frame));
}

/** Decompresses one frame on the thread pool (a reader's read-ahead overlaps it with the consumer). */
export function decompressAsync(compression: Exclude<LayerCompression, 'none'>, frame: Uint8Array): Promise<Uint8Array> {
  return compression === 'lz4' ? loadLz4().decompressFrame(frame) : loadZstd().decoder.decode(asBuffer(frame));
}

/**
 * One body buffer of a compressed batch, as stored: the length prefix read, the frame (or the stored
 * bytes) located. `region` is the buffer's bytes as the message lists them (prefix included).
 * @returns `stored`: the bytes when they were kept as they are (a view); `frame` and `length`: the
 *   codec frame and the length it must decompress to.
 * @throws Error when the region is shorter than its prefix or the prefix is not −1 or a length ≥ 0.
 */
export function splitCompressedBuffer(region: Uint8Array): { stored: Uint8Array } | { frame: Uint8Array; length: number } {
  if (region.byteLength === 0) return { stored: region };
  if (region.byteLength < LENGTH_PREFIX_BYTES) throw new Error(`a compressed buffer of ${region.byteLength} bytes has no room for its length prefix`);
  const prefix = new DataView(region.buffer, region.byteOffset, LENGTH_PREFIX_BYTES).getBigInt64(0, true);
  const rest = region.subarray(LENGTH_PREFIX_BYTES);
  if (prefix === UNCOMPRESSED_LENGTH) return { stored: rest };
  if (prefix < 0n || prefix > BigInt(Number.MAX_SAFE_INTEGER)) throw new Error(`a compressed buffer says it holds ${prefix} bytes`);
  return { frame: rest, length: Number(prefix) };
}

/**
 * The most bytes a frame can decompress to, from its block headers alone (nothing is decompressed), so
 * that a small hostile frame cannot expand into gigabytes. Zstandard (RFC 8878, "Zstandard Frames"):
 * raw and RLE blocks regenerate their Block_Size, a compressed block at most 128 KiB. LZ4 frame format
 * (lz4 "Frame format" 1.6.x): an uncompressed block is its size, a compressed block at most the frame's
 * Block Maximum Size. Concatenated frames add up.
 * @throws Error for bytes that are not a complete frame of the codec (bad magic, cut short, reserved bits).
 */
export function frameOutputBound(compression: Exclude<LayerCompression, 'none'>, frame: Uint8Array): number {
  const view = new DataView(frame.buffer, frame.byteOffset, frame.byteLength);
  const need = (at: number, bytes: number) => {
    if (at + bytes > frame.byteLength) throw new Error(`a ${compression} frame is cut short at byte ${at}`);
  };
  let at = 0;
  let bound = 0;
  do {
    need(at, 4);
    const magic = view.getUint32(at, true);
    if (compression === 'zstd') {
      if (magic !== 0xfd2fb528) throw new Error(`not a Zstandard frame (magic 0x${magic.toString(16)})`);
      need(at + 4, 1);
      const descriptor = frame[at + 4]!;
      if (descriptor & 0x08) throw new Error('a Zstandard frame header sets its reserved bit');
      const single = (descriptor & 0x20) !== 0;
      const fcsFlag = descriptor >> 6;
      const dictionary = [0, 1, 2, 4][descriptor & 0x03]!;
      const contentSize = fcsFlag === 0 ? (single ? 1 : 0) : [0, 2, 4, 8][fcsFlag]!;
      at += 5 + (single ? 0 : 1) + dictionary + contentSize;
      for (let last = false; !last; ) {
        need(at, 3);
        const header = frame[at]! | (frame[at + 1]! << 8) | (frame[at + 2]! << 16);
        last = (header & 1) === 1;
        const type = (header >> 1) & 3;
        const size = header >>> 3;
        if (type === 3) throw new Error('a Zstandard block has the reserved type');
        const content = type === 1 ? 1 : size;
        need(at + 3, content);
        bound += type === 2 ? 128 * 1024 : size;
        at += 3 + content;
      }
      if (descriptor & 0x04) at += 4; // content checksum
    } else {
      if (magic !== 0x184d2204) throw new Error(`not an LZ4 frame (magic 0x${magic.toString(16)})`);
      need(at + 4, 2);
      const flags = frame[at + 4]!;
      if (flags >> 6 !== 1) throw new Error('an LZ4 frame of another version');
      const maxBlock = [0, 0, 0, 0, 64 << 10, 256 << 10, 1 << 20, 4 << 20][(frame[at + 5]! >> 4) & 7]!;
      if (maxBlock === 0) throw new Error('an LZ4 frame with an invalid block maximum size');
      at += 6 + (flags & 0x08 ? 8 : 0) + (flags & 0x01 ? 4 : 0) + 1;
      for (;;) {
        need(at, 4);
        const word = view.getUint32(at, true);
        at += 4;
        if (word === 0) break; // end mark
        const size = word & 0x7fffffff;
        need(at, size);
        bound += word & 0x80000000 ? size : maxBlock;
        at += size + (flags & 0x10 ? 4 : 0);
      }
      if (flags & 0x04) at += 4; // content checksum
    }
    need(at, 0);
  } while (at < frame.byteLength);
  return bound;
}

/**
 * How far a frame's block-header bound may exceed what its batch holds: a compressed block counts as its
 * largest possible output (128 KiB for ZSTD, the frame's block maximum for LZ4) although encoders also
 * write smaller ones (1.4× on a VGG16 layer's ZSTD frames), so a legitimate frame's bound exceeds its
 * length by some factor; a hostile one (thousands of RLE or tiny blocks) by orders of magnitude.
 */
export const FRAME_BOUND_FACTOR = 8;

/**
 * Checks a frame before it is decompressed: its stated length must fit `limit` (what the batch can
 * hold) and its block headers must not allow more than `FRAME_BOUND_FACTOR` × `limit` plus one block,
 * so decompressing it can never take more memory than that.
 * @throws Error naming what does not fit.
 */
function assertFrameFits(compression: Exclude<LayerCompression, 'none'>, frame: Uint8Array, length: number, limit: number): void {
  if (length > limit) throw new Error(`a ${compression} buffer says it holds ${length} bytes, more than the ${limit} its batch can hold`);
  const bound = frameOutputBound(compression, frame);
  const block = compression === 'zstd' ? 128 * 1024 : 4 << 20;
  if (bound > FRAME_BOUND_FACTOR * limit + block) throw new Error(`a ${compression} frame can expand to ${bound} bytes, far more than the ${limit} its batch can hold (refused unread)`);
}

/**
 * Decodes one body buffer of a compressed batch (see `splitCompressedBuffer`), synchronously.
 * @param limit the most bytes the buffer may hold (from the batch's rows and the column's width): a
 *   larger stated length, or a frame whose blocks could expand far past it (`FRAME_BOUND_FACTOR`), is
 *   refused before decompressing.
 * @throws Error when the frame is damaged, too large, or decompresses to another length than its prefix says.
 */
export function decodeBufferSync(compression: Exclude<LayerCompression, 'none'>, region: Uint8Array, limit = Number.MAX_SAFE_INTEGER): Uint8Array {
  const parts = splitCompressedBuffer(region);
  if ('stored' in parts) return parts.stored;
  assertFrameFits(compression, parts.frame, parts.length, limit);
  const out = decompressSync(compression, parts.frame);
  if (out.byteLength !== parts.length) throw new Error(`a ${compression} buffer decompressed to ${out.byteLength} bytes, its prefix says ${parts.length}`);
  return out;
}

/** `decodeBufferSync` on the thread pool. */
export async function decodeBuffer(compression: Exclude<LayerCompression, 'none'>, region: Uint8Array, limit = Number.MAX_SAFE_INTEGER): Promise<Uint8Array> {
  const parts = splitCompressedBuffer(region);
  if ('stored' in parts) return parts.stored;
  assertFrameFits(compression, parts.frame, parts.length, limit);
  const out = await decompressAsync(compression, parts.frame);
  if (out.byteLength !== parts.length) throw new Error(`a ${compression} buffer decompressed to ${out.byteLength} bytes, its prefix says ${parts.length}`);
  return out;
}

/** What apache-arrow's general reader may decompress per buffer (it does not know the batch's widths). */
const GENERAL_READER_LIMIT = 2 ** 31;

function boundedDecode(compression: Exclude<LayerCompression, 'none'>, frame: Uint8Array): Uint8Array {
  const bound = frameOutputBound(compression, frame);
  if (bound > GENERAL_READER_LIMIT) throw new Error(`a ${compression} frame can expand to ${bound} bytes (refused unread)`);
  return decompressSync(compression, frame);
}

/**
 * The body of a compressed record batch, as apache-arrow's writer lays it out (pairs of length prefix
 * and frame, each pair padded to 8 bytes): every non-empty buffer becomes its uncompressed length as an
 * int64 followed by its codec frame, or −1 followed by the bytes as they are when the frame would not be
 * smaller; empty buffers stay empty. apache-arrow 21.2's own writer puts the frame's length in the prefix
 * instead of the uncompressed length (fixed upstream in apache/arrow-js pull request 470), which other
 * Arrow readers refuse, so Sonde's writer (resume.ts) lays the body out here.
 * @param compression the codec.
 * @param buffers the batch's body buffers in order (from apache-arrow's VectorAssembler).
 * @param ready a frame already made for a buffer (by `compressAsync` over exactly its bytes), if any.
 * @returns the body length, one region per buffer (prefix included) and the pieces to write.
 */
export function compressBodyBuffers(
  compression: Exclude<LayerCompression, 'none'>,
  buffers: readonly ArrayBufferView[],
  ready: (raw: Uint8Array) => Uint8Array | undefined = () => undefined,
): { byteLength: number; bufferRegions: BufferRegion[]; buffers: ArrayBufferView[] } {
  const pieces: ArrayBufferView[] = [];
  const bufferRegions: BufferRegion[] = [];
  let offset = 0;
  for (const buffer of buffers) {
    const raw = new Uint8Array(buffer.buffer, buffer.byteOffset, buffer.byteLength);
    if (raw.byteLength === 0) {
      pieces.push(new Uint8Array(0), new Uint8Array(0));
      bufferRegions.push(new BufferRegion(offset, 0));
      continue;
    }
    const frame = ready(raw) ?? compressSync(compression, raw);
    const kept = frame.byteLength < raw.byteLength;
    const prefix = new Uint8Array(LENGTH_PREFIX_BYTES);
    new DataView(prefix.buffer).setBigInt64(0, kept ? BigInt(raw.byteLength) : UNCOMPRESSED_LENGTH, true);
    const data = kept ? frame : raw;
    pieces.push(prefix, data);
    offset = (offset + 7) & ~7;
    bufferRegions.push(new BufferRegion(offset, LENGTH_PREFIX_BYTES + data.byteLength));
    offset += LENGTH_PREFIX_BYTES + data.byteLength;
  }
  return { byteLength: (offset + 7) & ~7, bufferRegions, buffers: pieces };
}

let registered = false;

/**
 * Registers both codecs with apache-arrow's codec registry, so that its IPC writer compresses record
 * batches (`compressionType`) and its general reader (`RecordBatchReader`) reads compressed files.
 * Idempotent; the native modules load only when a codec is first used.
 */
export function registerArrowCodecs(): void {
  if (registered) return;
  registered = true;
  compressionRegistry.set(CompressionType.LZ4_FRAME, { encode: (data) => compressSync('lz4', data), decode: (data) => boundedDecode('lz4', data) });
  compressionRegistry.set(CompressionType.ZSTD, { encode: (data) => compressSync('zstd', data), decode: (data) => boundedDecode('zstd', data) });
}
