import { createHash } from 'node:crypto';
import { closeSync, openSync, readSync, realpathSync, statSync } from 'node:fs';
import { basename, dirname, isAbsolute, relative, resolve } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import { identityOfOpen, sameState, type FileIdentity } from '../disk/file-identity.js';
import { assertRegularFile, realPathInside } from '../disk/input-file.js';
import { decodeModel, ONNX_DTYPE_NAMES, toNumber, type ModelProto, type TensorProto } from './onnx.js';
import { readSkeleton, type SkeletonFile } from './read-skeleton.js';

/** One dimension of a declared input: a number, or the `dim_param` name of a dynamic axis. */
export type Dim = number | string;

/** A model read from disk, its external weights resolved, ready to instrument. */
export interface LoadedModel {
  /** Absolute path of the .onnx file. */
  path: string;
  /** File name without folder, for manifests. */
  fileName: string;
  /**
   * SHA-256 (hex) of the .onnx file's bytes — the pairing key between snapshots. For a model with
   * external weight files it also covers them: the hash of the .onnx bytes followed, per weight file in
   * order of location, by the location, a NUL byte and the file's bytes (so changed weights change it).
   */
  sha256: string;
  /** The decoded model; external data already inlined into `rawData`. */
  proto: ModelProto;
  /** The single non-initializer graph input. */
  input: { name: string; dims: Dim[]; elemType: number };
  /** Graph output names, in declaration order. */
  outputs: string[];
  /** opset version of the default ("" or "ai.onnx") domain. */
  opset: number;
  /** Number of parameters (elements of all initializers). */
  parameterCount: number;
}

/**
 * The bytes each model came from, by its decoded proto: kept only where the proto is exactly the file's
 * content (no external weights inlined), so that graph/append.ts can add to the graph without encoding
 * the model again. Models derived from a loaded one (`{ ...model, proto }`) carry a new proto and have
 * no entry. The decoded proto holds views of these bytes already (raw weight data), so keeping them
 * costs no memory.
 */
const fileBytes = new WeakMap<ModelProto, Uint8Array>();

/** The file bytes `model.proto` was decoded from, where it is still exactly them; undefined otherwise. */
export function modelFileBytes(model: LoadedModel): Uint8Array | undefined {
  return fileBytes.get(model.proto);
}

/**
 * Takes the file bytes of `model` for good (modelFileBytes then has none): for a caller that writes
 * into the room after them and gives their buffer away (graph/append.ts, `consume`).
 */
export function takeModelFileBytes(model: LoadedModel): Uint8Array | undefined {
  const bytes = fileBytes.get(model.proto);
  fileBytes.delete(model.proto);
  return bytes;
}

/**
 * Where the bytes of each file loadModel read lie: by the buffer that holds them, the file (its real
 * path and identity when it was read) and the position of its first byte in that buffer. Weights the
 * decoded model holds are views of these buffers, so graph/weights-by-reference.ts can tell the runtime
 * to read them from the file instead of being handed a copy.
 */
const origins = new WeakMap<ArrayBufferLike, { identity: FileIdentity; start: number; length: number }>();

/**
 * The file a view's bytes were read from, and the offset of the view's first byte in it; undefined
 * unless the view lies wholly within the bytes of a file loadModel read (the model or an external weight
 * file).
 */
export function fileRangeOf(view: Uint8Array): { identity: FileIdentity; offset: number } | undefined {
  const origin = origins.get(view.buffer);
  if (!origin) return undefined;
  const offset = view.byteOffset - origin.start;
  return offset >= 0 && offset + view.byteLength <= origin.length ? { identity: origin.identity, offset } : undefined;
}

/** Where the raw data of an initializer not read yet lie (see `unreadWeightRange`). */
const unread = new WeakMap<TensorProto, { identity: FileIdentity; offset: number; length: number }>();

/**
 * Where an initializer's raw data lie in its file while they have not been read: loadModel leaves the
 * large weights of a large model in the file (graph/read-skeleton.ts) and reads each the first time its
 * `rawData` is asked for. Undefined once read or replaced, and for every other tensor.
 */
export function unreadWeightRange(tensor: TensorProto): { identity: FileIdentity; offset: number; length: number } | undefined {
  return unread.get(tensor);
}

/** Makes `tensor.rawData` read bytes [offset, offset + length) of the file the first time it is asked for. */
function readWhenAsked(tensor: TensorProto, identity: FileIdentity, offset: number, length: number): void {
  unread.set(tensor, { identity, offset, length });
  const settle = (value: Uint8Array | null | undefined): void => {
    unread.delete(tensor);
    Object.defineProperty(tensor, 'rawData', { value, writable: true, enumerable: true, configurable: true });
  };
  Object.defineProperty(tensor, 'rawData', {
    enumerable: true,
    configurable: true,
    get(): Uint8Array {
      const bytes = readRange(identity, offset, length);
      settle(bytes);
      return bytes;
    },
    set: settle,
  });
}

/**
 * Bytes [offset, offset + length) of the file `identity` names, in a buffer of their own registered for
 * `fileRangeOf`.
 * @throws RuntimeFailure `E_MODEL_CHANGED` when the file is no longer as it was read (the hash Sonde
 *   computed would not describe these bytes); RuntimeFailure `E_MODEL_READ` when it cannot be read.
 */
function readRange(identity: FileIdentity, offset: number, length: number): Uint8Array {
  let fd: number;
  try {
    fd = openSync(identity.path, 'r');
  } catch (error) {
    throw new RuntimeFailure('E_MODEL_READ', `cannot read the weights in ${identity.path}: ${(error as Error).message}`);
  }
  try {
    if (!sameState(identityOfOpen(identity.path, fd), identity)) {
      throw new RuntimeFailure('E_MODEL_CHANGED', `${identity.path} changed since Sonde read it (its large weights are read when needed)`, { hint: 'leave the model file as it is while a command runs, and run the command again' });
    }
    const bytes = new Uint8Array(new ArrayBuffer(length));
    for (let done = 0; done < length; ) {
      const read = readSync(fd, bytes, done, length - done, offset + done);
      if (read === 0) throw new RuntimeFailure('E_MODEL_CHANGED', `${identity.path} ended before the weights Sonde found in it`);
      done += read;
    }
    origins.set(bytes.buffer, { identity, start: -offset, length: identity.size });
    return bytes;
  } finally {
    closeSync(fd);
  }
}

/** Models from this size (bytes) leave their large weights in the file until asked for (graph/read-skeleton.ts). */
export const SKELETON_FROM_BYTES = 32 * 2 ** 20;
/** The smallest raw data left in the file. */
const UNREAD_MIN_BYTES = 64 * 1024;

/**
 * Reads a file into a buffer of its own (never Node's shared pool) with `room` unused bytes after the
 * file's (untouched pages take no memory), where graph/append.ts can write the additions to a model
 * without copying it, and registers where the bytes came from (`fileRangeOf`). The Buffer returned spans
 * the file's bytes only.
 */
function readWithRoom(path: string, room: (size: number) => number): Buffer {
  const fd = openSync(path, 'r');
  try {
    const identity = identityOfOpen(realpathSync(path), fd);
    const size = identity.size;
    const bytes = Buffer.from(new ArrayBuffer(size + room(size)), 0, size);
    let at = 0;
    while (at < size) {
      const read = readSync(fd, bytes, at, size - at, at);
      if (read === 0) break; // the file shrank while it was read
      at += read;
    }
    // a file that changed while it was read is not registered: its bytes may be no single state of it
    const whole = at === size && sameState(identityOfOpen(identity.path, fd), identity);
    if (whole) origins.set(bytes.buffer, { identity, start: bytes.byteOffset, length: size });
    return at < size ? bytes.subarray(0, at) : bytes;
  } finally {
    closeSync(fd);
  }
}

/** Room after a model file's bytes: 2 MiB plus 1/64 of the size. */
const MODEL_ROOM = (size: number): number => 2 * 2 ** 20 + Math.ceil(size / 64);

/** Options of `loadModel`. */
export interface LoadOptions {
  /**
   * Files of at least this many bytes leave their large weights (raw data of 64 KiB and more) in the
   * file, read the first time they are asked for (`unreadWeightRange`, graph/read-skeleton.ts); the
   * runtime then reads them itself (graph/weights-by-reference.ts). Default SKELETON_FROM_BYTES (32 MiB);
   * Infinity reads every file whole.
   */
  skeletonFromBytes?: number;
}

/**
 * Reads, decodes and validates an ONNX model. Weights stored in external data files are read from
 * paths relative to the model's folder and inlined, so that the model can be handed to the runtime
 * as bytes after instrumentation. A large model's large weights stay in its file until asked for
 * (`options.skeletonFromBytes`).
 * @throws UsageError when the file is missing, not ONNX, truncated, has no graph, or has zero or
 *   several non-initializer inputs; RuntimeFailure when it cannot be read.
 */
export function loadModel(path: string, options: LoadOptions = {}): LoadedModel {
  const absolute = resolve(path);
  let bytes: Uint8Array;
  let skeleton: SkeletonFile | null = null;
  try {
    const stats = statSync(absolute);
    if (stats.isDirectory()) {
      throw new UsageError('E_MODEL_READ', `model ${path} is a directory, not an .onnx file`);
    }
    assertRegularFile(absolute, `model ${path}`); // a FIFO or device would block or never end
    if (stats.size >= (options.skeletonFromBytes ?? SKELETON_FROM_BYTES)) skeleton = readSkeleton(absolute, UNREAD_MIN_BYTES);
    bytes = skeleton ? skeleton.skeleton : readWithRoom(absolute, MODEL_ROOM);
  } catch (error) {
    if (error instanceof UsageError) throw error;
    const code = (error as NodeJS.ErrnoException).code;
    if (code === 'ENOENT') throw new UsageError('E_MODEL_MISSING', `model ${path} does not exist`, { hint: 'check the path' });
    throw new RuntimeFailure('E_MODEL_READ', `cannot read model ${path}: ${(error as Error).message}`);
  }
  if (bytes.length === 0) throw new UsageError('E_MODEL_FORMAT', `model ${path} is empty (0 bytes)`);
  let proto = decodeOrRefuse(bytes, path);
  if (skeleton && !leaveWeightsUnread(proto, skeleton)) {
    // external weight files (the hash covers them), or a skeleton that does not match its decoding: read whole
    skeleton = null;
    bytes = readWithRoom(absolute, MODEL_ROOM);
    proto = decodeOrRefuse(bytes, path);
  }
  const graph = proto.graph;
  if (!graph || !graph.node || graph.node.length === 0) {
    throw new UsageError('E_MODEL_FORMAT', `model ${path} is not a valid ONNX file (no graph or no nodes)`);
  }
  assertUtf8Names(graph, path);
  const opsetEntry = (proto.opsetImport ?? []).find((o) => !o.domain || o.domain === 'ai.onnx');
  if (!opsetEntry) throw new UsageError('E_MODEL_FORMAT', `model ${path} declares no opset for the default ONNX domain`);
  const weightFiles = inlineExternalData(proto, dirname(absolute), path);
  if (weightFiles.size === 0 && !skeleton) fileBytes.set(proto, bytes);

  const initializerNames = new Set((graph.initializer ?? []).map((t) => t.name ?? ''));
  const inputs = (graph.input ?? []).filter((i) => !initializerNames.has(i.name ?? ''));
  if (inputs.length !== 1) {
    throw new UsageError('E_MODEL_INPUTS', `model ${path} has ${inputs.length} data inputs (${inputs.map((i) => i.name).join(', ') || 'none'}); Sonde needs exactly one`);
  }
  const input = inputs[0]!;
  const tensorType = input.type?.tensorType;
  const elemType = tensorType?.elemType ?? 0;
  if (elemType !== 1) {
    throw new UsageError('E_MODEL_INPUTS', `model ${path}: input "${input.name}" has element type ${ONNX_DTYPE_NAMES[elemType] ?? elemType}; Sonde feeds float32 inputs`);
  }
  const dims: Dim[] = (tensorType?.shape?.dim ?? []).map((d) => (d.dimParam ? d.dimParam : d.dimValue !== null && d.dimValue !== undefined && toNumber(d.dimValue) > 0 ? toNumber(d.dimValue) : '?'));
  let parameterCount = 0;
  for (const t of graph.initializer ?? []) parameterCount += (t.dims ?? []).reduce<number>((a, d) => a * toNumber(d), 1);
  const names = new Set<string>();
  for (const node of graph.node) {
    for (const name of node.output ?? []) {
      if (name && names.has(name)) throw new UsageError('E_MODEL_FORMAT', `model ${path}: tensor "${name}" is produced by two nodes`);
      if (name) names.add(name);
    }
  }
  for (const node of graph.node) {
    for (const name of node.input ?? []) {
      if (name && !names.has(name) && !initializerNames.has(name) && name !== input.name) {
        throw new UsageError('E_MODEL_FORMAT', `model ${path}: node "${node.name ?? node.opType}" reads tensor "${name}", which nothing produces (missing initializer?)`);
      }
    }
  }
  return {
    path: absolute,
    fileName: basename(absolute),
    sha256: skeleton ? skeleton.sha256 : modelDigest(bytes, weightFiles),
    proto,
    input: { name: input.name ?? '', dims, elemType },
    outputs: (graph.output ?? []).map((o) => o.name ?? ''),
    opset: toNumber(opsetEntry.version),
    parameterCount,
  };
}

/** `bytes` decoded. @throws UsageError `E_MODEL_FORMAT` naming the file when they are not ONNX. */
function decodeOrRefuse(bytes: Uint8Array, path: string): ModelProto {
  try {
    return decodeModel(bytes);
  } catch (error) {
    throw new UsageError('E_MODEL_FORMAT', `model ${path} is not a valid ONNX file (${(error as Error).message.split('\n')[0]})`, {
      hint: 'the file may be truncated or not an ONNX model',
    });
  }
}

/**
 * Makes the initializers whose raw data the skeleton left out read them from the file when asked for;
 * false (nothing changed) where the model has external weight files or the skeleton does not match
 * its decoding.
 */
function leaveWeightsUnread(proto: ModelProto, skeleton: SkeletonFile): boolean {
  const initializers = proto.graph?.initializer ?? [];
  if (initializers.some((t) => t.dataLocation === 1)) return false;
  const targets = skeleton.weights.map((w) => initializers[w.ordinal]);
  if (targets.some((t) => !t || (t.rawData?.byteLength ?? 0) > 0)) return false;
  skeleton.weights.forEach((w, i) => readWhenAsked(targets[i]!, skeleton.identity, w.offset, w.length));
  return true;
}

/**
 * Refuses tensor names that were not valid UTF-8 in the file. The protobuf decoder replaces invalid
 * bytes with U+FFFD, so such a name no longer matches the model's bytes, two names can collapse into one,
 * and nobody can type it in --layers or a spec; a name that contains U+FFFD itself is refused alike (it
 * cannot be told apart, and is as untypable).
 * @throws UsageError naming the tensor (as decoded), the node that uses it and the fix.
 */
function assertUtf8Names(graph: NonNullable<ModelProto['graph']>, path: string): void {
  const check = (name: string | null | undefined, where: string) => {
    if (name && name.includes('\uFFFD')) {
      throw new UsageError('E_MODEL_NAME', `model ${path}: tensor name ${JSON.stringify(name)} (${where}) is not valid UTF-8; Sonde stores names as text and selects layers by them`, {
        hint: 'rename the tensor, e.g. with the onnx Python package (node.output / node.input / graph.initializer names)',
      });
    }
  };
  for (const node of graph.node ?? []) {
    for (const name of node.output ?? []) check(name, `output of node "${node.name || node.opType}"`);
    for (const name of node.input ?? []) check(name, `input of node "${node.name || node.opType}"`);
  }
  for (const t of graph.initializer ?? []) check(t.name, 'an initializer');
  for (const v of [...(graph.input ?? []), ...(graph.output ?? [])]) check(v.name, 'a graph input or output');
}

/** SHA-256 of the model bytes and, in order of location, each external weight file's location and bytes. */
function modelDigest(bytes: Uint8Array, weightFiles: ReadonlyMap<string, Buffer>): string {
  const hash = createHash('sha256').update(bytes);
  for (const location of [...weightFiles.keys()].sort()) hash.update(location).update(new Uint8Array([0])).update(weightFiles.get(location)!);
  return hash.digest('hex');
}

/**
 * Reads each initializer whose data lives in an external file and stores it inline (raw_data).
 * @returns the weight files read, by location as the model names it.
 */
function inlineExternalData(proto: ModelProto, folder: string, modelPath: string): Map<string, Buffer> {
  const cache = new Map<string, Buffer>();
  const byLocation = new Map<string, Buffer>();
  for (const tensor of proto.graph?.initializer ?? []) {
    if (tensor.dataLocation !== 1) continue; // 1 = EXTERNAL in TensorProto.DataLocation
    const entries = new Map((tensor.externalData ?? []).map((e) => [e.key ?? '', e.value ?? '']));
    const location = entries.get('location');
    if (!location) throw new UsageError('E_MODEL_EXTERNAL', `model ${modelPath}: initializer "${tensor.name}" is external but names no location`);
    const file = resolve(folder, location);
    const rel = relative(folder, file);
    if (isAbsolute(location) || rel.startsWith('..')) {
      throw new UsageError('E_MODEL_EXTERNAL', `model ${modelPath}: external data location "${location}" of "${tensor.name}" is outside the model's folder`);
    }
    let data = cache.get(file);
    if (!data) {
      try {
        // a symbolic link may not lead the weights out of the model's folder, nor to a FIFO or device
        assertWeightsInside(folder, file, modelPath, `model ${modelPath}: external data file "${location}" of "${tensor.name}"`);
        assertRegularFile(file, `model ${modelPath}: external data file "${location}" of "${tensor.name}"`);
        data = readWithRoom(file, () => 0);
      } catch (error) {
        if (error instanceof UsageError) throw error;
        throw new UsageError('E_MODEL_EXTERNAL', `model ${modelPath}: external data file "${location}" for "${tensor.name}" cannot be read (looked in ${folder})`, {
          hint: 'keep the external data files next to the model',
        });
      }
      cache.set(file, data);
    }
    byLocation.set(location, data);
    const offset = Number(entries.get('offset') ?? 0);
    const length = entries.has('length') ? Number(entries.get('length')) : data.length - offset;
    if (!(offset >= 0 && length >= 0 && offset + length <= data.length)) {
      throw new UsageError('E_MODEL_EXTERNAL', `model ${modelPath}: external data of "${tensor.name}" (offset ${offset}, length ${length}) exceeds "${location}" (${data.length} bytes)`);
    }
    tensor.rawData = data.subarray(offset, offset + length);
    tensor.dataLocation = 0;
    tensor.externalData = [];
  }
  return byLocation;
}

/**
 * Refuses an external data file that resolves (links followed) outside the model's folder. The folder is
 * the one the model was named in, or the real folder of the model file when that is itself a link (a
 * folder of links into a model store holds links to the model and to its weights).
 * @throws UsageError `E_LINK_OUTSIDE` naming the file and where it resolves.
 */
function assertWeightsInside(folder: string, file: string, modelPath: string, what: string): void {
  try {
    realPathInside(folder, file, what);
  } catch (error) {
    if (!(error instanceof UsageError)) throw error;
    const realFolder = dirname(realpathSync(resolve(modelPath)));
    if (realFolder === realpathSync(folder)) throw error;
    try {
      realPathInside(realFolder, file, what);
    } catch {
      throw error;
    }
  }
}

/** Element count of an initializer (product of dims). */
export function tensorElementCount(tensor: TensorProto): number {
  return (tensor.dims ?? []).reduce<number>((a, d) => a * toNumber(d), 1);
}
