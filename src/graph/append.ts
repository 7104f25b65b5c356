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
import type { LoadedModel } from './load-model.js';
import { modelFileBytes } from './load-model.js';
import { encodeModel, onnx, type NodeProto, type TensorProto, type ValueInfoProto } from './onnx.js';

/** What to add to a model's graph, each after the entries the graph already has. */
export interface GraphAdditions {
  node?: readonly NodeProto[];
  initializer?: readonly TensorProto[];
  output?: readonly ValueInfoProto[];
}

/** ONNX bytes of `model` with `add` appended to its graph; `model` itself is left as it was. */
export function encodeWithAdditions(model: LoadedModel, add: GraphAdditions): Uint8Array {
  const file = modelFileBytes(model);
  if (file) {
    const tail = onnx.ModelProto.encode({ graph: { node: [...(add.node ?? [])], initializer: [...(add.initializer ?? [])], output: [...(add.output ?? [])] } }).finish();
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
  try {
    return encodeModel(model.proto);
  } finally {
    graph.node = original.node;
    graph.initializer = original.initializer;
    graph.output = original.output;
  }
}
