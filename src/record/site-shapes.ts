/**
 * Which tensors of an inspected model can be modulated, with their geometry (`SiteShape`): every
 * recordable tensor with a feature axis (feature maps, vectors, token tensors, along its layout), and
 * the float tensors whose first axis is not the batch (torchvision's attention output before the output
 * projection is [T·N, D], batch and tokens merged), which take one gain shared by every stimulus.
 * Heads of a multi-head tensor come from the graph: the nearest attention-weighted values (a MatMul
 * reading a Softmax) upstream through Reshape/Transpose hold d = D / H features per head. A head count
 * a layout inferred for a tensor after the output projection (which mixes the heads) is dropped; one
 * declared in the sidecar is kept.
 */
import type { TensorLayout } from '../graph/layout.js';
import type { GraphStructure } from '../graph/structure.js';
import { siteShapeOf } from '../modulation/site-shape.js';
import type { SiteShape } from '../modulation/types.js';
import type { LayerInfo, ModelInspection } from './inspect-model.js';

/** Operators heads are traced back through: they move or regroup values without mixing features across heads. */
const REGROUPING = new Set(['Reshape', 'Transpose', 'Identity', 'Squeeze', 'Unsqueeze', 'Flatten']);

/** The declared layout of a layer, when inspection gave it one. */
function layoutOf(layer: LayerInfo): TensorLayout | undefined {
  return (layer as LayerInfo & { layout?: TensorLayout }).layout;
}

/**
 * Per-stimulus site geometry of every recordable tensor with a feature axis, along its layout (without a
 * declared layout: [C, H, W] maps, [C] vectors, [T, D] tokens).
 */
export function siteShapes(layers: readonly LayerInfo[]): Map<string, SiteShape> {
  const sites = new Map<string, SiteShape>();
  for (const layer of layers) {
    const layout = layoutOf(layer);
    if (layout === undefined && layer.shape.length !== 1 && layer.shape.length !== 2 && layer.shape.length !== 3) continue;
    const shape = siteShapeOf(layer.shape, layout);
    if (shape !== null) sites.set(layer.name, shape);
  }
  return sites;
}

/**
 * Every modulable tensor of a model: `siteShapes(inspection.layers)`, plus float tensors that depend on
 * the input but whose first axis is not the batch (shared sites, features on the last axis), each with
 * its heads when the graph shows them.
 */
export function modulationSites(inspection: ModelInspection): Map<string, SiteShape> {
  const sites = siteShapes(inspection.layers);
  for (const [name, shape] of sites) {
    if (shape.layout.kind !== 'tokens' || shape.layout.source === 'sidecar') continue;
    // heads are separate features only up to the attention's output projection, which mixes them: a
    // head count the graph does not trace back to the attention-weighted values is not used for gains
    const heads = headsFromGraph(inspection.structure, inspection.probed, name, shape.features);
    if (heads !== null) sites.set(name, { ...shape, heads });
    else if (shape.heads !== undefined) {
      const { heads: _mixed, ...rest } = shape;
      sites.set(name, rest);
    }
  }
  for (const skipped of inspection.skippedTensors) {
    // only tensors skipped for where their batch axis is (batch later, merged): not constants, not
    // integer shape arithmetic, not tensors without a batch axis
    if (!(skipped.reason as string).startsWith('batch')) continue;
    const probed = inspection.probed.get(skipped.name);
    if (!probed || probed.type !== 'float32' || probed.dims.length < 2) continue;
    const rank = probed.dims.length;
    const features = probed.dims[rank - 1]!;
    const heads = headsFromGraph(inspection.structure, inspection.probed, skipped.name, features);
    const shape = siteShapeOf(probed.dims, { kind: 'tokens', featureAxis: rank - 1, source: 'graph' }, { shared: true, ...(heads !== null ? { heads } : {}) });
    if (shape !== null) sites.set(skipped.name, shape);
  }
  return sites;
}

/**
 * Heads of `tensor` from the graph: walking producers through regrouping operators (at most 6 steps),
 * the first MatMul whose first input comes from a Softmax (attention weights times values) has d
 * features per head on its last axis; H = features / d when that divides. Null when no such MatMul is
 * found.
 */
export function headsFromGraph(structure: GraphStructure, probed: ModelInspection['probed'], tensor: string, features: number): number | null {
  let current = tensor;
  for (let step = 0; step < 6; step++) {
    const index = structure.producer.get(current);
    if (index === undefined) return null;
    const node = structure.nodes[index]!;
    if (node.opType === 'MatMul') {
      const left = structure.producer.get(node.inputs[0] ?? '');
      if (left === undefined || structure.nodes[left]!.opType !== 'Softmax') return null;
      const dims = probed.get(current)?.dims;
      const d = dims?.[dims.length - 1];
      if (d === undefined || d < 1 || features % d !== 0 || d === features) return null;
      return features / d;
    }
    if (!REGROUPING.has(node.opType)) return null;
    current = node.inputs[0] ?? '';
  }
  return null;
}
