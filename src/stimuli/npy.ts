/**
 * Reading and writing NumPy `.npy` files (format versions 1.0, 2.0 and 3.0): the magic string
 * `\x93NUMPY`, a major/minor version byte pair, a little-endian header length (2 bytes in 1.0, 4 in
 * 2.0/3.0), a Python-literal header dict with `descr`, `fortran_order`, `shape`, padded so the data
 * starts on a 64-byte boundary, then the raw data (C order, or Fortran order when `fortran_order` is True).
 */
import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { UsageError } from '../errors.js';

/** Element types Sonde reads from `.npy`; the key is NumPy's little-endian `descr`. */
export const NPY_DTYPES = {
  '<f4': Float32Array,
  '<f8': Float64Array,
  '<i4': Int32Array,
  '|u1': Uint8Array,
} as const;

export type NpyDescr = keyof typeof NPY_DTYPES;
export type NpyArray = Float32Array | Float64Array | Int32Array | Uint8Array;

/** A parsed `.npy` array: the data (a fresh, aligned copy) and its C-order shape. */
export interface NpyTensor<T extends NpyArray = NpyArray> {
  descr: NpyDescr;
  shape: number[];
  data: T;
}

const MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]; // \x93NUMPY

/**
 * Alignment the header must end on. NumPy pads the header with spaces so that magic + version + length
 * field + header is a multiple of 64 bytes (numpy.lib.format, ARRAY_ALIGN); NumPy before 1.14 padded to
 * 16 (from memory), so 16 is what a reader can demand of every file NumPy ever wrote.
 */
export const NPY_HEADER_ALIGN = 16;

/** The parsed header of a `.npy` file. */
export interface NpyHeader {
  /** Format version (major, minor): 1.0, 2.0 or 3.0. */
  version: [number, number];
  /** NumPy's dtype string as written (e.g. `<f4`). */
  descr: string;
  /** Data in Fortran (column-major) order. */
  fortranOrder: boolean;
  shape: number[];
  /** Byte offset of the data (end of the header). */
  dataStart: number;
}

/**
 * Parses and checks a `.npy` header by the rules of the NumPy format specification (numpy.lib.format;
 * NEP 1): the magic `\x93NUMPY`; version 1.0 (2-byte little-endian HEADER_LEN) or 2.0/3.0 (4-byte;
 * 3.0 encodes the header in UTF-8, earlier ones in latin-1); the header a Python literal dict with exactly
 * the keys `descr` (a string), `fortran_order` (True/False) and `shape` (a tuple of non-negative
 * integers, `(n,)` for one axis), padded with spaces and terminated by a newline, ending on a multiple
 * of `NPY_HEADER_ALIGN` bytes. Python 2 long suffixes (`3L`) are accepted, as NumPy's own reader does.
 * @param bytes the file's bytes, or at least its header.
 * @throws UsageError naming `source` and the rule broken.
 */
export function parseNpyHeader(bytes: Uint8Array, source = '.npy input'): NpyHeader {
  if (bytes.length < 10 || MAGIC.some((b, i) => bytes[i] !== b)) {
    throw new UsageError('E_NPY', `${source} is not a .npy file (missing the \\x93NUMPY magic string)`);
  }
  const major = bytes[6]!;
  const minor = bytes[7]!;
  if ((major !== 1 && major !== 2 && major !== 3) || minor !== 0) {
    throw new UsageError('E_NPY', `${source}: unsupported .npy format version ${major}.${minor} (known: 1.0, 2.0, 3.0)`);
  }
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const headerStart = major === 1 ? 10 : 12;
  if (bytes.length < headerStart) throw new UsageError('E_NPY', `${source}: truncated .npy header`);
  const headerLength = major === 1 ? view.getUint16(8, true) : view.getUint32(8, true);
  if (headerStart + headerLength > bytes.length) throw new UsageError('E_NPY', `${source}: truncated .npy header (${headerLength} bytes announced, ${bytes.length - headerStart} present)`);
  const dataStart = headerStart + headerLength;
  if (dataStart % NPY_HEADER_ALIGN !== 0) {
    throw new UsageError('E_NPY', `${source}: the .npy header ends at byte ${dataStart}, not on a multiple of ${NPY_HEADER_ALIGN} (the format pads it with spaces); the file is damaged or was not written by a NumPy-compatible writer`, { hint: 'save it again with numpy.save' });
  }
  let header: string;
  try {
    header = new TextDecoder(major === 3 ? 'utf-8' : 'latin1', { fatal: true }).decode(bytes.subarray(headerStart, dataStart));
  } catch {
    throw new UsageError('E_NPY', `${source}: the version 3.0 .npy header is not valid UTF-8`);
  }
  if (!header.endsWith('\n')) throw new UsageError('E_NPY', `${source}: the .npy header does not end with a newline`, { hint: 'save it again with numpy.save' });
  const fields = parseHeaderDict(header.slice(0, -1), source);
  return { version: [major, minor], ...fields, dataStart };
}

/**
 * Parses `.npy` bytes (header checked as in `parseNpyHeader`). Fortran-ordered data are reordered to C
 * order, so `data` is always C order. `source` names the file in error messages.
 * @throws UsageError when the bytes are not a supported `.npy` (see `parseNpyHeader`; big-endian or
 *   unsupported dtype; data shorter or longer than the shape says).
 */
export function parseNpy(bytes: Uint8Array, source = '.npy input'): NpyTensor {
  const header = parseNpyHeader(bytes, source);
  let descr = header.descr;
  if (descr === '<u1') descr = '|u1';
  if (!(descr in NPY_DTYPES)) {
    throw new UsageError('E_NPY', `${source}: dtype ${JSON.stringify(descr)} is not supported`, {
      hint: `save it as float32 (numpy: arr.astype("<f4")); supported: ${Object.keys(NPY_DTYPES).join(', ')}`,
    });
  }
  const shape = header.shape;
  const Ctor = NPY_DTYPES[descr as NpyDescr];
  const count = shape.reduce((a, b) => a * b, 1);
  const byteLength = count * Ctor.BYTES_PER_ELEMENT;
  const present = bytes.length - header.dataStart;
  if (present < byteLength) {
    throw new UsageError('E_NPY', `${source}: data is truncated (shape [${shape.join(', ')}] needs ${byteLength} bytes, file has ${present})`);
  }
  if (present > byteLength) {
    throw new UsageError('E_NPY', `${source}: ${present - byteLength} bytes follow the data that shape [${shape.join(', ')}] describes; the header and the data disagree`, { hint: 'save it again with numpy.save' });
  }
  // copy into a fresh buffer: the data offset need not be aligned for the element size
  // (Uint8Array.prototype.slice: a Node Buffer's own slice() returns a view into a shared pool)
  const copy = Uint8Array.prototype.slice.call(bytes, header.dataStart, header.dataStart + byteLength);
  const stored = new Ctor(copy.buffer, 0, count);
  if (!header.fortranOrder || shape.length <= 1) return { descr: descr as NpyDescr, shape, data: stored };
  const data = new Ctor(count);
  fortranToC(stored, shape, data);
  return { descr: descr as NpyDescr, shape, data };
}

/**
 * Reads only the header of a `.npy` file (e.g. to learn a stimulus array's shape before loading it).
 * @throws UsageError as `parseNpyHeader`, or when the file cannot be read.
 */
export function readNpyHeader(path: string, source = path): NpyHeader {
  let fd: number;
  try {
    fd = openSync(path, 'r');
  } catch (error) {
    throw new UsageError('E_NPY', `${source} cannot be read (${(error as NodeJS.ErrnoException).code ?? (error as Error).message})`);
  }
  try {
    const head = new Uint8Array(12);
    const got = readSync(fd, head, 0, 12, 0);
    const length = got >= 12 && head[6] !== 1 ? new DataView(head.buffer).getUint32(8, true) : got >= 10 ? new DataView(head.buffer).getUint16(8, true) : 0;
    const total = Math.min(12 + length, fstatSync(fd).size, 1 << 24); // headers are small; 16 MiB bounds a hostile length
    const bytes = new Uint8Array(total);
    readSync(fd, bytes, 0, total, 0);
    return parseNpyHeader(bytes, source);
  } finally {
    closeSync(fd);
  }
}

/** C-order copy of Fortran-ordered `src` (first axis fastest) into `out`. */
function fortranToC(src: NpyArray, shape: readonly number[], out: NpyArray): void {
  const rank = shape.length;
  // Fortran layout: offset = i0 + d0·(i1 + d1·(i2 + …)); stride[k] = d0·…·d(k−1)
  const stride = new Array<number>(rank);
  stride[0] = 1;
  for (let k = 1; k < rank; k++) stride[k] = stride[k - 1]! * shape[k - 1]!;
  const index = new Array<number>(rank).fill(0);
  let offset = 0;
  for (let c = 0; c < out.length; c++) {
    out[c] = src[offset]!;
    // next C-order index: the last axis runs fastest
    for (let k = rank - 1; k >= 0; k--) {
      index[k]! += 1;
      offset += stride[k]!;
      if (index[k]! < shape[k]!) break;
      offset -= stride[k]! * shape[k]!;
      index[k] = 0;
    }
  }
}

/** The dict literal of a header (newline removed): exactly descr, fortran_order, shape; then only spaces. */
function parseHeaderDict(text: string, source: string): Pick<NpyHeader, 'descr' | 'fortranOrder' | 'shape'> {
  const fail = (why: string): never => {
    throw new UsageError('E_NPY', `${source}: malformed .npy header ${JSON.stringify(text.trim().slice(0, 120))}: ${why}`);
  };
  let at = 0;
  const space = () => {
    while (at < text.length && (text[at] === ' ' || text[at] === '\t')) at++;
  };
  const expect = (ch: string) => {
    space();
    if (text[at] !== ch) fail(`expected "${ch}" at character ${at}`);
    at++;
  };
  const peek = (): string | undefined => {
    space();
    return text[at];
  };
  const string = (): string => {
    space();
    const quote = text[at];
    if (quote !== "'" && quote !== '"') fail(`expected a quoted string at character ${at}`);
    const end = text.indexOf(quote!, at + 1);
    if (end < 0) fail('unterminated string');
    const value = text.slice(at + 1, end);
    if (value.includes('\\')) fail('escapes in strings are not supported');
    at = end + 1;
    return value;
  };
  const integer = (): number => {
    space();
    const match = /^\d+L?/.exec(text.slice(at));
    if (!match) fail(`expected a non-negative integer at character ${at}`);
    at += match![0].length;
    const value = Number(match![0].replace('L', ''));
    if (!Number.isSafeInteger(value)) fail(`axis length ${match![0]} is too large`);
    return value;
  };
  const values: { descr?: string; fortranOrder?: boolean; shape?: number[] } = {};
  expect('{');
  while (peek() !== '}') {
    const key = string();
    expect(':');
    if (key === 'descr') {
      if (values.descr !== undefined) fail('key "descr" appears twice');
      if (peek() !== "'" && peek() !== '"') fail('"descr" must be a dtype string (structured arrays are not supported)');
      values.descr = string();
    } else if (key === 'fortran_order') {
      if (values.fortranOrder !== undefined) fail('key "fortran_order" appears twice');
      space();
      const word = /^(True|False)/.exec(text.slice(at));
      if (!word) fail('"fortran_order" must be True or False');
      at += word![0].length;
      values.fortranOrder = word![0] === 'True';
    } else if (key === 'shape') {
      if (values.shape !== undefined) fail('key "shape" appears twice');
      expect('(');
      const shape: number[] = [];
      let trailingComma = false;
      while (peek() !== ')') {
        shape.push(integer());
        trailingComma = false;
        if (peek() === ',') {
          at++;
          trailingComma = true;
        } else if (peek() !== ')') fail(`expected "," or ")" in "shape" at character ${at}`);
      }
      at++;
      // Python: (3) is the integer 3, a one-axis tuple is (3,)
      if (shape.length === 1 && !trailingComma) fail('"shape" (n) is not a tuple; one axis is written (n,)');
      values.shape = shape;
    } else fail(`unexpected key ${JSON.stringify(key)} (a .npy header has exactly descr, fortran_order and shape)`);
    if (peek() === ',') at++;
    else if (peek() !== '}') fail(`expected "," or "}" at character ${at}`);
  }
  at++;
  if (!/^ *$/.test(text.slice(at))) fail('only spaces may follow the dict before the newline');
  if (values.descr === undefined || values.fortranOrder === undefined || values.shape === undefined) {
    fail(`missing key ${['descr', 'fortran_order', 'shape'].filter((k, i) => [values.descr, values.fortranOrder, values.shape][i] === undefined).join(', ')}`);
  }
  return { descr: values.descr!, fortranOrder: values.fortranOrder!, shape: values.shape! };
}

/** Serialises a C-order array as `.npy` version 1.0. The inverse of `parseNpy`. */
export function formatNpy(data: NpyArray, shape: readonly number[]): Uint8Array {
  const count = shape.reduce((a, b) => a * b, 1);
  if (count !== data.length) {
    throw new UsageError('E_NPY', `formatNpy: shape [${shape.join(', ')}] holds ${count} elements but data has ${data.length}`);
  }
  const descr = data instanceof Float32Array ? '<f4' : data instanceof Float64Array ? '<f8' : data instanceof Int32Array ? '<i4' : '|u1';
  const header = formatNpyHeader(descr, shape);
  const out = new Uint8Array(header.length + data.byteLength);
  out.set(header, 0);
  out.set(new Uint8Array(data.buffer, data.byteOffset, data.byteLength), header.length);
  return out;
}

/**
 * The header of a C-order `.npy` version 1.0 file (magic, version, length, dict padded with spaces so the
 * data starts on a 64-byte boundary, newline): what a streaming writer puts before the raw data.
 * @param descr NumPy's dtype string (`<f2` for float16 bit patterns, `<f4`, `<f8`, `<i4`, `|u1`).
 * @param shape the array's shape (C order).
 * @throws UsageError when the dict does not fit the 1.0 format's 2-byte length (a shape of thousands of axes).
 */
export function formatNpyHeader(descr: NpyDescr | '<f2', shape: readonly number[]): Uint8Array {
  const shapeText = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
  let header = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${shapeText}, }`;
  const unpadded = 10 + header.length + 1; // + trailing newline
  header += ' '.repeat((64 - (unpadded % 64)) % 64) + '\n';
  if (header.length > 0xffff) throw new UsageError('E_NPY', `formatNpyHeader: a header of ${header.length} bytes does not fit .npy version 1.0`);
  const out = new Uint8Array(10 + header.length);
  out.set(MAGIC, 0);
  out[6] = 1;
  out[7] = 0;
  new DataView(out.buffer).setUint16(8, header.length, true);
  for (let i = 0; i < header.length; i++) out[10 + i] = header.charCodeAt(i);
  return out;
}
