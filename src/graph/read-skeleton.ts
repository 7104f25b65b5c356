/**
 * Reads an ONNX file's structure without reading its large weights into memory. The file is hashed
 * through one small reused buffer, and its Protocol Buffers encoding is walked field by field (the
 * wire format: protobuf.dev, "Encoding"): every field is copied as it is, except the payloads of large
 * `raw_data` fields (TensorProto field 9) of the graph's initializers (GraphProto field 5), which are
 * left out and the lengths of the messages around them written anew. The result decodes like the file
 * with those initializers' raw data empty; where each left-out payload lies in the file is returned,
 * for graph/load-model.ts to read on demand or to hand the runtime by reference.
 *
 * Reading a 553 MB VGG16 whole into a fresh buffer took 0.35–0.9 s on a 2-core VM (most of it the
 * first touch of 135 000 fresh pages); through a reused 8 MiB buffer the bytes cost only their hashing.
 */
import { createHash } from 'node:crypto';
import { closeSync, openSync, readSync, realpathSync } from 'node:fs';
import { identityOfOpen, sameState, type FileIdentity } from '../disk/file-identity.js';
import { MODEL_GRAPH_FIELD } from './onnx.js';

/** An ONNX file's structure with its large weights left out (see the module comment). */
export interface SkeletonFile {
  /** A valid ONNX encoding: the file with the left-out payloads gone. */
  skeleton: Uint8Array;
  /**
   * The left-out payloads: per initializer field of the file's graph field(s), counted in file order
   * over all of them (`ordinal`: its index in the decoded, merged graph's initializer list), the offset
   * and length of its raw data in the file.
   */
  weights: Array<{ ordinal: number; offset: number; length: number }>;
  /** SHA-256 (hex) of the whole file. */
  sha256: string;
  /** The file as it was read (unchanged from the first read to the last). */
  identity: FileIdentity;
}

/** GraphProto.initializer and TensorProto.raw_data field numbers (onnx.proto; ModelProto.graph is MODEL_GRAPH_FIELD). */
const GRAPH_INITIALIZER = 5;
const TENSOR_RAW_DATA = 9;
/** Bytes hashed at a time, and the most the walk reads at once. */
const WINDOW_BYTES = 8 * 2 ** 20;
/** Bytes the walk reads at a time. */
const REFILL_BYTES = 256 * 1024;

/**
 * The skeleton of the ONNX file at `path`, leaving out raw data payloads of at least `minBytes`; null
 * where the encoding holds something the walk does not follow (a deprecated group, a length past its
 * message's end) or the file changed while it was read: the caller then reads it whole, whose decoding
 * reports what is wrong.
 * @throws what opening or reading the file throws.
 */
export function readSkeleton(path: string, minBytes: number): SkeletonFile | null {
  const fd = openSync(path, 'r');
  try {
    const identity = identityOfOpen(realpathSync(path), fd);
    const reader = new WindowReader(fd, identity.size);
    const sha256 = reader.hashAll();
    const walk = new SkeletonWalk(reader, minBytes);
    const skeleton = walk.model();
    const after = identityOfOpen(identity.path, fd);
    if (skeleton === null || !sameState(after, identity)) return null;
    return { skeleton, weights: walk.weights, sha256, identity };
  } finally {
    closeSync(fd);
  }
}

/** Positional reads of one file through a reused window. */
class WindowReader {
  private readonly window = Buffer.allocUnsafeSlow(WINDOW_BYTES);
  private start = 0;
  private end = 0;

  constructor(private readonly fd: number, readonly size: number) {}

  /** SHA-256 of the whole file, read in window-sized pieces. */
  hashAll(): string {
    const hash = createHash('sha256');
    for (let at = 0; at < this.size; ) {
      const read = readSync(this.fd, this.window, 0, Math.min(WINDOW_BYTES, this.size - at), at);
      if (read === 0) throw new Error(`the file ended at byte ${at} of ${this.size}`);
      hash.update(this.window.subarray(0, read));
      at += read;
    }
    this.start = this.end = 0;
    return hash.digest('hex');
  }

  /**
   * A view of bytes [at, at + length): valid until the next call; length at most the window. A miss reads
   * REFILL_BYTES (or `length`) from `at`: the walk moves forward, and skips the weights between fields.
   */
  view(at: number, length: number): Uint8Array {
    if (at < this.start || at + length > this.end) {
      const read = readSync(this.fd, this.window, 0, Math.min(Math.max(length, REFILL_BYTES), this.size - at), at);
      this.start = at;
      this.end = at + read;
      if (at + length > this.end) throw new RangeError(`bytes ${at}..${at + length} are past the end of the file`);
    }
    return this.window.subarray(at - this.start, at - this.start + length);
  }

  /** A copy of bytes [at, at + length) of its own. */
  copy(at: number, length: number): Uint8Array {
    if (length <= WINDOW_BYTES) return new Uint8Array(this.view(at, length));
    const out = new Uint8Array(length);
    for (let done = 0; done < length; ) {
      const read = readSync(this.fd, out, done, length - done, at + done);
      if (read === 0) throw new RangeError(`bytes ${at}..${at + length} are past the end of the file`);
      done += read;
    }
    return out;
  }

  /** The varint at `at` and the position after it; null when it runs past `limit` or is longer than 10 bytes. */
  varint(at: number, limit: number): [number, number] | null {
    const bytes = this.view(at, Math.min(10, limit - at));
    let value = 0;
    let scale = 1;
    for (let i = 0; i < bytes.length; i++) {
      const byte = bytes[i]!;
      value += (byte & 0x7f) * scale;
      if (byte < 0x80) return [value, at + i + 1];
      scale *= 128;
    }
    return null;
  }
}

/** A field of a message: its number, wire type, where its tag starts and ends, where its payload starts and ends. */
interface Field {
  number: number;
  wireType: number;
  tagAt: number;
  tagEnd: number;
  payloadAt: number;
  end: number;
}

/** The walk that writes the skeleton, as pieces per message so lengths can be written anew. */
class SkeletonWalk {
  readonly weights: Array<{ ordinal: number; offset: number; length: number }> = [];
  private initializers = 0;

  constructor(private readonly reader: WindowReader, private readonly minBytes: number) {}

  /** The skeleton of the whole file, or null (see readSkeleton). */
  model(): Uint8Array | null {
    const pieces: Uint8Array[] = [];
    const fields = this.fields(0, this.reader.size);
    if (fields === null) return null;
    for (const field of fields) {
      if (field.number === MODEL_GRAPH_FIELD && field.wireType === 2) {
        const graph = this.graph(field);
        if (graph === null) return null;
        pieces.push(...graph);
      } else pieces.push(this.reader.copy(field.tagAt, field.end - field.tagAt));
    }
    return concat(pieces);
  }

  /** The graph field rewritten: tag, new length, its fields with large initializers' raw data left out. */
  private graph(field: Field): Uint8Array[] | null {
    const fields = this.fields(field.payloadAt, field.end);
    if (fields === null) return null;
    const body: Uint8Array[] = [];
    for (const inner of fields) {
      if (inner.number === GRAPH_INITIALIZER && inner.wireType === 2) {
        const tensor = this.tensor(inner, this.initializers++);
        if (tensor === null) return null;
        body.push(...tensor);
      } else body.push(this.reader.copy(inner.tagAt, inner.end - inner.tagAt));
    }
    return withLength(this.reader.copy(field.tagAt, field.tagEnd - field.tagAt), body);
  }

  /** An initializer field, its raw data left out when large. */
  private tensor(field: Field, ordinal: number): Uint8Array[] | null {
    if (field.end - field.payloadAt < this.minBytes) return [this.reader.copy(field.tagAt, field.end - field.tagAt)];
    const fields = this.fields(field.payloadAt, field.end);
    if (fields === null) return null;
    const raw = fields.filter((f) => f.number === TENSOR_RAW_DATA && f.wireType === 2);
    // one raw_data field, large: left out (several would be merged by a parser, last one winning; keep those as they are)
    if (raw.length !== 1 || raw[0]!.end - raw[0]!.payloadAt < this.minBytes) return [this.reader.copy(field.tagAt, field.end - field.tagAt)];
    this.weights.push({ ordinal, offset: raw[0]!.payloadAt, length: raw[0]!.end - raw[0]!.payloadAt });
    const body = fields.filter((f) => f !== raw[0]).map((f) => this.reader.copy(f.tagAt, f.end - f.tagAt));
    return withLength(this.reader.copy(field.tagAt, field.tagEnd - field.tagAt), body);
  }

  /** The fields of the message in [start, end); null for a group or anything malformed. */
  private fields(start: number, end: number): Field[] | null {
    const out: Field[] = [];
    for (let at = start; at < end; ) {
      const tag = this.reader.varint(at, end);
      if (tag === null) return null;
      const [key, next] = tag;
      const wireType = key % 8;
      const number = Math.floor(key / 8);
      let payloadAt = next;
      let fieldEnd: number;
      if (wireType === 0) {
        const value = this.reader.varint(next, end);
        if (value === null) return null;
        fieldEnd = value[1];
      } else if (wireType === 1) fieldEnd = next + 8;
      else if (wireType === 5) fieldEnd = next + 4;
      else if (wireType === 2) {
        const length = this.reader.varint(next, end);
        if (length === null) return null;
        payloadAt = length[1];
        fieldEnd = payloadAt + length[0];
      } else return null; // groups (3, 4) and unknown wire types
      if (number === 0 || fieldEnd > end) return null;
      out.push({ number, wireType, tagAt: at, tagEnd: next, payloadAt, end: fieldEnd });
      at = fieldEnd;
    }
    return out;
  }
}

/** A length-delimited field written anew around `body`: its tag, the new length, the body. */
function withLength(tag: Uint8Array, body: Uint8Array[]): Uint8Array[] {
  return [tag, encodeVarint(body.reduce((sum, piece) => sum + piece.length, 0)), ...body];
}

/** The protobuf varint of a non-negative integer. */
function encodeVarint(value: number): Uint8Array {
  const out: number[] = [];
  let rest = value;
  while (rest >= 0x80) {
    out.push((rest % 128) | 0x80);
    rest = Math.floor(rest / 128);
  }
  out.push(rest);
  return Uint8Array.from(out);
}

/** The pieces in one buffer of its own. */
function concat(pieces: readonly Uint8Array[]): Uint8Array {
  const out = new Uint8Array(pieces.reduce((sum, piece) => sum + piece.length, 0));
  let at = 0;
  for (const piece of pieces) {
    out.set(piece, at);
    at += piece.length;
  }
  return out;
}
