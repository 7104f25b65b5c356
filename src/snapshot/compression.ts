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
  decompressFrameSync(data: Buffer): Buffer;
  decompressFrame(data: Uint8Array): Promise<Buffer>;
}
interface ZstdModule {
  Encoder: new (level: number) => { encodeSync(data: Buffer): Buffer };
  Decoder: new () => { decodeSync(data: Buffer): Buffer; decode(data: Buffer): Promise<Buffer> };
}

const require = createRequire(import.meta.url);
let lz4: Lz4Module | null = null;
let zstd: { encoder: { encodeSync(data: Buffer): Buffer }; decoder: { decodeSync(data: Buffer): Buffer; decode(data: Buffer): Promise<Buffer> } } | null = null;

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
      zstd = { encoder: new module.Encoder(ZSTD_LEVEL), decoder: new module.Decoder() };
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

/** Compresses one buffer with the codec (a complete LZ4 frame or Zstandard frame). */
export function compressSync(compression: Exclude<LayerCompression, 'none'>, data: Uint8Array): Uint8Array {
  return compression === 'lz4' ? loadLz4().compressFrameSync(asBuffer(data)) : loadZstd().encoder.encodeSync(asBuffer(data));
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
 * Decodes one body buffer of a compressed batch (see `splitCompressedBuffer`), synchronously.
 * @throws Error when the frame is damaged or decompresses to another length than its prefix says.
 */
export function decodeBufferSync(compression: Exclude<LayerCompression, 'none'>, region: Uint8Array): Uint8Array {
  const parts = splitCompressedBuffer(region);
  if ('stored' in parts) return parts.stored;
  const out = decompressSync(compression, parts.frame);
  if (out.byteLength !== parts.length) throw new Error(`a ${compression} buffer decompressed to ${out.byteLength} bytes, its prefix says ${parts.length}`);
  return out;
}

/** `decodeBufferSync` on the thread pool. */
export async function decodeBuffer(compression: Exclude<LayerCompression, 'none'>, region: Uint8Array): Promise<Uint8Array> {
  const parts = splitCompressedBuffer(region);
  if ('stored' in parts) return parts.stored;
  const out = await decompressAsync(compression, parts.frame);
  if (out.byteLength !== parts.length) throw new Error(`a ${compression} buffer decompressed to ${out.byteLength} bytes, its prefix says ${parts.length}`);
  return out;
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
 * @returns the body length, one region per buffer (prefix included) and the pieces to write.
 */
export function compressBodyBuffers(compression: Exclude<LayerCompression, 'none'>, buffers: readonly ArrayBufferView[]): { byteLength: number; bufferRegions: BufferRegion[]; buffers: ArrayBufferView[] } {
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
    const frame = compressSync(compression, raw);
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
  compressionRegistry.set(CompressionType.LZ4_FRAME, { encode: (data) => compressSync('lz4', data), decode: (data) => decompressSync('lz4', data) });
  compressionRegistry.set(CompressionType.ZSTD, { encode: (data) => compressSync('zstd', data), decode: (data) => decompressSync('zstd', data) });
}
