import { UsageError } from '../errors.js';
import type { LoadedModel } from './load-model.js';
import { makeValueInfo, type NodeProto, type ValueInfoProto } from './onnx.js';

/** Where and how to insert `y = x * G + B`. */
export interface InjectionSite {
  /** The site tensor (a node output or, in a tail graph, a graph input). */
  site: string;
  /** Per-stimulus shape of the site (batch dropped): [C, H, W], [C] or tokens [T, D]; for a shared site the whole tensor's shape. */
  shape: number[];
  /** G and B cover every position ([N, C, H, W], [N, T, D]) instead of one value per feature ([N, C, 1, 1], [N, 1, D]). */
  spatial: boolean;
  /** Axis of `shape` that holds features (default 0: channels first). */
  featureAxis?: number;
  /** The tensor's first axis is not the batch: G and B are one broadcast row `[1, …, F, …]` for every stimulus. */
  shared?: boolean;
}

/** Names of the extra graph inputs that carry a site's gain and offset. */
export function modulationInputNames(site: string): { gain: string; offset: string } {
  return { gain: `sonde.gain:${site}`, offset: `sonde.offset:${site}` };
}

/**
 * Dims of a site's G/B input for `rows` stimuli: the site's shape with every non-feature axis 1
 * ([rows, C, 1, 1], [rows, 1, D]), or the full shape when spatial; a shared site's dims have no rows
 * axis ([1, D] for a [T·N, D] tensor).
 */
export function modulationInputDims(site: InjectionSite, rows: number): number[] {
  const axis = site.featureAxis ?? 0;
  const dims = site.shape.map((size, a) => (site.spatial || a === axis ? size : 1));
  if (site.shape.length === 0) dims.push(1);
  return site.shared ? dims : [rows, ...dims];
}

/**
 * Returns a copy of `model` in which each site tensor S is replaced by y = S·G + B: the tensor's
 * definition (its producing node's output, or a graph input of that name) is renamed `S::raw`, and a
 * Mul and an Add recreate S from it, so every consumer — and a graph output named S — reads the
 * modulated value without being rewired. G and B become graph inputs `sonde.gain:S` and
 * `sonde.offset:S`. With G = 1 and B = 0 the network computes exactly what it did (x·1 + 0 = x in
 * IEEE arithmetic). The original model object is not modified.
 * @throws UsageError when a site is neither produced by a node nor a graph input, or listed twice.
 */
export function injectModulations(model: LoadedModel, sites: readonly InjectionSite[]): LoadedModel {
  const graph = model.proto.graph!;
  const nodes: NodeProto[] = (graph.node ?? []).slice();
  const inputs: ValueInfoProto[] = (graph.input ?? []).slice();
  const seen = new Set<string>();
  for (const site of sites) {
    if (seen.has(site.site)) throw new UsageError('E_SITE', `site "${site.site}" is modulated twice`, { hint: 'combine the two modulations into one' });
    seen.add(site.site);
    const raw = `${site.site}::raw`;
    const names = modulationInputNames(site.site);
    const producerIndex = nodes.findIndex((n) => (n.output ?? []).includes(site.site));
    const inserted: NodeProto[] = [
      { name: `sonde.mul:${site.site}`, opType: 'Mul', input: [raw, names.gain], output: [`${site.site}::gained`], domain: '' },
      { name: `sonde.add:${site.site}`, opType: 'Add', input: [`${site.site}::gained`, names.offset], output: [site.site], domain: '' },
    ];
    if (producerIndex >= 0) {
      const producer = nodes[producerIndex]!;
      nodes[producerIndex] = { ...producer, output: (producer.output ?? []).map((o) => (o === site.site ? raw : o)) };
      nodes.splice(producerIndex + 1, 0, ...inserted);
    } else {
      const inputIndex = inputs.findIndex((i) => i.name === site.site);
      if (inputIndex < 0) throw new UsageError('E_SITE', `site "${site.site}" is not a tensor of ${model.fileName}`);
      inputs[inputIndex] = { ...inputs[inputIndex]!, name: raw };
      nodes.unshift(...inserted);
    }
    const dims = site.shared ? modulationInputDims(site, 1) : ['batch', ...modulationInputDims(site, 1).slice(1)];
    inputs.push(makeValueInfo(names.gain, 1, dims), makeValueInfo(names.offset, 1, dims));
  }
  const proto = Object.assign(Object.create(Object.getPrototypeOf(model.proto)), model.proto, {
    graph: Object.assign(Object.create(Object.getPrototypeOf(graph)), graph, { node: nodes, input: inputs }),
  });
  return { ...model, proto };
}
