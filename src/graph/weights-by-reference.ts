/**
 * A model for the runtime whose large weights stay in the files Sonde read them from. Each large
 * initializer the model holds as a view of a file's bytes (the .onnx file's own, or an external weight
 * file's: graph/load-model.ts records where those views lie) is written as an ONNX external-data entry
 * instead (TensorProto.data_location EXTERNAL with location, offset and length: onnx/docs/ExternalData.md)
 * that points at its bytes inside that file, and the runtime is told which folder the locations are
 * relative to (`RuntimeModel.weights`). The bytes handed over shrink to the graph (17 KB for VGG16
 * instead of 553 MB), and the runtime reads the weights from the file itself while it builds the
 * session instead of parsing them out of a copy: measured on VGG16, session creation 0.40–0.55 s and
 * about 155 000 page faults, against 1.0–2.0 s and 414 000 from the bytes (docs/bench/).
 *
 * The weights the runtime reads are the ones Sonde hashed for the manifest as long as the files keep the
 * identity they had when they were read (src/disk/file-identity.ts): a file that changed since is not
 * referenced (its weights travel in the bytes, as read), and createNetworkSession refuses a file that
 * changes while the runtime reads it.
 */
import { realpathSync } from 'node:fs';
import { dirname, isAbsolute, relative, sep } from 'node:path';
import { unchanged, type FileIdentity } from '../disk/file-identity.js';
import type { RuntimeModel } from '../session/network-session.js';
import { encodeWithAdditions, type GraphAdditions } from './append.js';
import { fileRangeOf, takeModelFileBytes, unreadWeightRange, type LoadedModel } from './load-model.js';
import { encodeModel, type TensorProto } from './onnx.js';

/** How encodeForRuntime treats the model. */
export interface ReferenceOptions {
  /** The smallest raw weight, in bytes, stored by reference; smaller ones stay in the bytes (each reference is one read by the runtime). Default 16 KiB. */
  minBytes?: number;
  /**
   * The caller owns `model` and needs none of its weights afterwards: the referenced weights are dropped
   * from it (their raw data become empty; the graph structure stays readable), so the buffers the files
   * were read into can be freed while the runtime holds its own copy. Where nothing can be referenced,
   * the model's file buffer goes to the runtime instead (graph/append.ts, `consume`).
   */
  release?: boolean;
}

/** TensorProto.DataLocation EXTERNAL (onnx.proto). */
const EXTERNAL = 1;

/**
 * `model` with `add` appended to its graph, for createNetworkSession: large weights by reference where
 * they are views of a file Sonde read that is unchanged and lies in the model's folder (its real folder),
 * the rest in the bytes. Falls back to encodeWithAdditions (every weight in the bytes) where nothing can
 * be referenced: weights built in memory, a model read from bytes, a changed file. `model` is left as it
 * was unless `release`.
 */
export function encodeForRuntime(model: LoadedModel, add: GraphAdditions, options: ReferenceOptions = {}): RuntimeModel {
  const minBytes = options.minBytes ?? 16 * 1024;
  const graph = model.proto.graph!;
  const own = graph.initializer ?? [];
  let folder: string | undefined;
  const fileStates = new Map<string, boolean>();
  const files = new Map<string, FileIdentity>();
  const referenced: TensorProto[] = [];
  const initializer = own.map((tensor): TensorProto => {
    if (tensor.dataLocation === EXTERNAL) return tensor;
    // weights loadModel left in the file are referenced without being read (asking for rawData reads them)
    const unread = unreadWeightRange(tensor);
    const raw = unread ? undefined : tensor.rawData;
    const length = unread ? unread.length : raw?.byteLength ?? 0;
    if (length < minBytes || length === 0) return tensor;
    const range = unread ?? (raw ? fileRangeOf(raw) : undefined);
    if (!range) return tensor;
    folder ??= realFolder(model.path);
    if (folder === undefined) return tensor;
    const location = relative(folder, range.identity.path);
    if (location === '' || isAbsolute(location) || location === '..' || location.startsWith(`..${sep}`)) return tensor;
    let fresh = fileStates.get(range.identity.path);
    if (fresh === undefined) {
      fresh = unchanged(range.identity);
      fileStates.set(range.identity.path, fresh);
    }
    if (!fresh) return tensor;
    files.set(range.identity.path, range.identity);
    referenced.push(tensor);
    const copy: Record<string, unknown> = {};
    for (const key of Object.keys(tensor)) if (key !== 'rawData') copy[key] = (tensor as Record<string, unknown>)[key];
    return {
      ...(copy as TensorProto),
      dataLocation: EXTERNAL,
      externalData: [
        { key: 'location', value: location.split(sep).join('/') },
        { key: 'offset', value: String(range.offset) },
        { key: 'length', value: String(length) },
      ],
    };
  });
  if (referenced.length === 0 || folder === undefined) return { bytes: encodeWithAdditions(model, add, { consume: options.release ?? false }) };
  const encoded = encodeModel({
    ...model.proto,
    graph: {
      ...graph,
      node: [...(graph.node ?? []), ...(add.node ?? [])],
      initializer: [...initializer, ...(add.initializer ?? [])],
      output: [...(graph.output ?? []), ...(add.output ?? [])],
    },
  } as typeof model.proto);
  if (options.release) {
    for (const tensor of referenced) tensor.rawData = new Uint8Array(0);
    takeModelFileBytes(model);
  }
  // protobufjs takes small results from Node's shared Buffer pool: copy those into a buffer of their own
  const bytes = encoded.byteOffset === 0 && encoded.byteLength === encoded.buffer.byteLength ? encoded : new Uint8Array(encoded);
  return { bytes, weights: { folder, files: [...files.values()] } };
}

/** The real folder of the model's file (links resolved), or undefined when it cannot be resolved now. */
function realFolder(path: string): string | undefined {
  try {
    return dirname(realpathSync(path));
  } catch {
    return undefined;
  }
}
