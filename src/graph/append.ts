/**
 * ONNX bytes of a model with nodes, initializers and graph outputs added after its own — what exposing
 * tensors (graph/instrument.ts), casting them to float16 (graph/expose-half.ts) and adding readout
 * heads (graph/readout-heads.ts) hand the runtime.
 *
 * A model read straight from its file (loadModel, no external weight files) is not encoded again: the
 * result is the file's bytes followed by a second `graph` field (ModelProto field 7) that holds only the
 * additions. Protocol Buffers parsers merge repeated occurrences of an embedded message field, and
 * concatenate its repeated fields (protobuf.dev, "Encoding", section "Last One Wins"), so the runtime and
 * the onnx Python package read the same graph as from a full encoding: the model's nodes, initializers
 * and outputs, then the added ones. For VGG16 (553 MB) a full encoding took 0.24–0.96 s of a record's
 * set-up; the concatenation is one copy.
 */
import { modelFileBytes, takeModelFileBytes, type LoadedModel } from './load-model.js';
import { encodeModel, onnx, type NodeProto, type TensorProto, type ValueInfoProto } from './onnx.js';

/** What to add to a model's graph, each after the entries the graph already has. */
export interface GraphAdditions {
  node?: readonly NodeProto[];
  initializer?: readonly TensorProto[];
  output?: readonly ValueInfoProto[];
}

/** How encodeWithAdditions may treat the model. */
export interface AppendOptions {
  /**
   * The caller owns `model` and needs nothing of its weights afterwards: the additions are written into
   * the room loadModel left after the file's bytes, and the result is a view of that same buffer, which
   * the caller gives away whole (a runtime session takes it over: createNetworkSession's `giveBytes`).
   * After that the model's raw weight data are detached (empty); its graph structure stays readable.
   * Saves a copy of the model (553 MB for VGG16) and frees the file's bytes once the runtime has read
   * them, instead of holding them for the whole recording.
   */
  consume?: boolean;
}

/**
 * ONNX bytes of `model` with `add` appended to its graph; `model` itself is left as it was (but see
 * `consume`). The bytes' ArrayBuffer is the caller's alone: a fresh one, or with `consume` the model
 * file's own.
 */
export function encodeWithAdditions(model: LoadedModel, add: GraphAdditions, options: AppendOptions = {}): Uint8Array {
  const file = modelFileBytes(model);
  if (file) {
    const tail = onnx.ModelProto.encode({ graph: { node: [...(add.node ?? [])], initializer: [...(add.initializer ?? [])], output: [...(add.output ?? [])] } }).finish();
    const end = file.byteOffset + file.length;
    if (options.consume && !(file.buffer instanceof SharedArrayBuffer) && file.buffer.byteLength - end >= tail.length) {
      takeModelFileBytes(model);
      const bytes = new Uint8Array(file.buffer, file.byteOffset, file.length + tail.length);
      bytes.set(tail, file.length);
      return bytes;
    }
    // a whole ArrayBuffer of its own, so a session may take it over without a copy (giveBytes)
    const bytes = new Uint8Array(new ArrayBuffer(file.length + tail.length));
    bytes.set(file, 0);
    bytes.set(tail, file.length);
    return bytes;
  }
  const graph = model.proto.graph!;
  const original = { node: graph.node, initializer: graph.initializer, output: graph.output };
  graph.node = [...(graph.node ?? []), ...(add.node ?? [])];
  graph.initializer = [...(graph.initializer ?? []), ...(add.initializer ?? [])];
  graph.output = [...(graph.output ?? []), ...(add.output ?? [])];
  let encoded: Uint8Array;
  try {
    encoded = encodeModel(model.proto);
  } finally {
    graph.node = original.node;
    graph.initializer = original.initializer;
    graph.output = original.output;
  }
  // protobufjs takes small results from Node's shared Buffer pool: copy those into a buffer of their own
  return encoded.byteOffset === 0 && encoded.byteLength === encoded.buffer.byteLength ? encoded : new Uint8Array(encoded);
}
