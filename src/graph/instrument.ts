import type { LoadedModel } from './load-model.js';
import { encodeWithAdditions, type AppendOptions, type GraphAdditions } from './append.js';
import { makeValueInfo, type ValueInfoProto } from './onnx.js';
import { encodeForRuntime, type ReferenceOptions } from './weights-by-reference.js';
import type { RuntimeModel } from '../session/network-session.js';

/**
 * Returns ONNX bytes of `model` with `names` added as graph outputs (after the existing ones, skipping
 * names that already are outputs). Nodes and initializers are untouched, so weights stay
 * byte-identical. Output types are taken from the model's value_info when present; the runtime infers
 * them otherwise. `options.consume`: see graph/append.ts.
 */
export function exposeTensors(model: LoadedModel, names: readonly string[], options: AppendOptions = {}): Uint8Array {
  return encodeWithAdditions(model, exposureAdditions(model, names), options);
}

/** What exposeTensors adds to the graph of `model` (for graph/weights-by-reference.ts's encodeForRuntime). */
export function exposureAdditions(model: LoadedModel, names: readonly string[]): GraphAdditions {
  const graph = model.proto.graph!;
  const original = graph.output ?? [];
  const known = new Map<string, ValueInfoProto>();
  for (const info of graph.valueInfo ?? []) if (info.name) known.set(info.name, info);
  const present = new Set(original.map((o) => o.name ?? ''));
  const extra: ValueInfoProto[] = [];
  for (const name of names) {
    if (present.has(name)) continue;
    present.add(name);
    const info = known.get(name);
    extra.push(info?.type?.tensorType ? { name, type: { tensorType: { elemType: info.type.tensorType.elemType } } } : makeValueInfo(name));
  }
  return { output: extra };
}

/**
 * As exposeTensors, for a runtime session: large weights by reference into the files they were read
 * from where that is possible (graph/weights-by-reference.ts), so the runtime reads them itself.
 */
export function exposeForRuntime(model: LoadedModel, names: readonly string[], options: ReferenceOptions = {}): RuntimeModel {
  return encodeForRuntime(model, exposureAdditions(model, names), options);
}
