/**
 * Reading and writing NumPy `.npy` files (format versions 1.0, 2.0 and 3.0): the magic string
 * `\x93NUMPY`, a major/minor version byte pair, a little-endian header length (2 bytes in 1.0, 4 in
 * 2.0/3.0), a Python-literal header dict with `descr`, `fortran_order`, `shape`, padded so the data
 * starts on a 64-byte boundary, then the raw C-order data.
 */
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
 * Parses `.npy` bytes. `source` names the file in error messages.
 * @throws UsageError when the bytes are not a supported `.npy` (bad magic, Fortran order, big-endian or
 *   unsupported dtype, data shorter than the shape says).
 */
export function parseNpy(bytes: Uint8Array, source = '.npy input'): NpyTensor {
  if (bytes.length < 10 || MAGIC.some((b, i) => bytes[i] !== b)) {
    throw new UsageError('E_NPY', `${source} is not a .npy file (missing the \\x93NUMPY magic string)`);
  }
  const major = bytes[6]!;
  let headerLength: number;
  let headerStart: number;
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  if (major === 1) {
    headerLength = view.getUint16(8, true);
    headerStart = 10;
  } else if (major === 2 || major === 3) {
    if (bytes.length < 12) throw new UsageError('E_NPY', `${source}: truncated .npy header`);
    headerLength = view.getUint32(8, true);
    headerStart = 12;
  } else {
    throw new UsageError('E_NPY', `${source}: unsupported .npy format version ${major}.${bytes[7]}`);
  }
  if (headerStart + headerLength > bytes.length) throw new UsageError('E_NPY', `${source}: truncated .npy header`);
  const header = new TextDecoder(major === 3 ? 'utf-8' : 'latin1').decode(bytes.subarray(headerStart, headerStart + headerLength));
  const descrMatch = /['"]descr['"]\s*:\s*['"]([^'"]+)['"]/.exec(header);
  const fortranMatch = /['"]fortran_order['"]\s*:\s*(True|False)/.exec(header);
  const shapeMatch = /['"]shape['"]\s*:\s*\(([^)]*)\)/.exec(header);
  if (!descrMatch || !fortranMatch || !shapeMatch) {
    throw new UsageError('E_NPY', `${source}: malformed .npy header ${JSON.stringify(header.trim())}`);
  }
  let descr = descrMatch[1]!;
  if (descr === '<u1') descr = '|u1';
  if (!(descr in NPY_DTYPES)) {
    throw new UsageError('E_NPY', `${source}: dtype ${JSON.stringify(descr)} is not supported`, {
      hint: `save it as float32 (numpy: arr.astype("<f4")); supported: ${Object.keys(NPY_DTYPES).join(', ')}`,
    });
  }
  if (fortranMatch[1] === 'True') {
    throw new UsageError('E_NPY', `${source}: Fortran-ordered arrays are not supported`, { hint: 'save np.ascontiguousarray(arr)' });
  }
  const shape = shapeMatch[1]!
    .split(',')
    .map((s) => s.trim())
    .filter((s) => s.length > 0)
    .map((s) => Number.parseInt(s, 10));
  if (shape.some((d) => !Number.isFinite(d) || d < 0)) throw new UsageError('E_NPY', `${source}: bad shape (${shapeMatch[1]})`);
  const Ctor = NPY_DTYPES[descr as NpyDescr];
  const count = shape.reduce((a, b) => a * b, 1);
  const dataStart = headerStart + headerLength;
  const byteLength = count * Ctor.BYTES_PER_ELEMENT;
  if (dataStart + byteLength > bytes.length) {
    throw new UsageError('E_NPY', `${source}: data is truncated (shape [${shape.join(', ')}] needs ${byteLength} bytes, file has ${bytes.length - dataStart})`);
  }
  // copy into a fresh buffer: the data offset need not be aligned for the element size
  // (Uint8Array.prototype.slice: a Node Buffer's own slice() returns a view into a shared pool)
  const copy = Uint8Array.prototype.slice.call(bytes, dataStart, dataStart + byteLength);
  const data = new Ctor(copy.buffer, 0, count);
  return { descr: descr as NpyDescr, shape, data };
}

/** Serialises a C-order array as `.npy` version 1.0. The inverse of `parseNpy`. */
export function formatNpy(data: NpyArray, shape: readonly number[]): Uint8Array {
  const count = shape.reduce((a, b) => a * b, 1);
  if (count !== data.length) {
    throw new UsageError('E_NPY', `formatNpy: shape [${shape.join(', ')}] holds ${count} elements but data has ${data.length}`);
  }
  const descr = data instanceof Float32Array ? '<f4' : data instanceof Float64Array ? '<f8' : data instanceof Int32Array ? '<i4' : '|u1';
  const shapeText = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
  let header = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${shapeText}, }`;
  const unpadded = 10 + header.length + 1; // + trailing newline
  header += ' '.repeat((64 - (unpadded % 64)) % 64) + '\n';
  const out = new Uint8Array(10 + header.length + data.byteLength);
  out.set(MAGIC, 0);
  out[6] = 1;
  out[7] = 0;
  new DataView(out.buffer).setUint16(8, header.length, true);
  for (let i = 0; i < header.length; i++) out[10 + i] = header.charCodeAt(i);
  out.set(new Uint8Array(data.buffer, data.byteOffset, data.byteLength), 10 + header.length);
  return out;
}
