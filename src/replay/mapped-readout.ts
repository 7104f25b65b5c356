/**
 * A readout map applied to a model before anything is replayed (`sense`, the ceiling's gradients): the
 * map is resolved against the readout tensor, the category scores are appended as ONNX nodes
 * (src/graph/category-scores.ts) and the model is inspected again, so the new [N, G] output is an
 * ordinary readout whose units are the map's categories — for finite differences and for the gradient
 * graph alike.
 */
import { closestHint, UsageError } from '../errors.js';
import { resolveReadoutMap, type ReadoutMap, type ResolvedReadoutMap } from '../graph/category-map.js';
import { withCategoryScores } from '../graph/category-scores.js';
import type { LoadedModel } from '../graph/load-model.js';
import { readSidecar } from '../graph/sidecar.js';
import { inspectModel, type ModelInspection } from '../record/inspect-model.js';
import type { ReadoutChoice } from './sense-plan.js';

/** The model with category scores, its inspection, the readout over the categories, and the resolved map. */
export interface MappedReadout {
  model: LoadedModel;
  inspection: ModelInspection;
  readout: ReadoutChoice;
  map: ResolvedReadoutMap;
}

/**
 * The unit names of a readout tensor: the sidecar's `outputs.kinds` when the sidecar names this tensor
 * with one kind per unit, else null (units are then indices only).
 */
export function readoutUnitNames(model: LoadedModel, tensor: string, width: number): string[] | null {
  const outputs = readSidecar(model.path)?.outputs;
  return outputs && outputs.name === tensor && outputs.kinds.length === width ? outputs.kinds.map(String) : null;
}

/**
 * Resolves `map` against the readout tensor `text` (default: the sidecar's readout when the model has
 * it, else the first graph output) and appends the category scores.
 * @param text `--readout` (a tensor name; no `:UNIT` part — the map picks the units).
 * @returns the mapped model, its inspection and the readout over the map's categories.
 * @throws UsageError for an unknown tensor, a tensor that is not one vector per stimulus, a `:UNIT`
 *   part, or a map that does not resolve (see `resolveReadoutMap`).
 */
export async function mapReadout(text: string | undefined, model: LoadedModel, inspection: ModelInspection, map: ReadoutMap, inputShape?: number[]): Promise<MappedReadout> {
  const byName = new Map(inspection.layers.map((l) => [l.name, l]));
  const named = readSidecar(model.path)?.outputs?.name;
  const tensor = text ?? (named !== undefined && byName.has(named) ? named : model.outputs[0] ?? '');
  const layer = byName.get(tensor);
  if (!layer) {
    const at = tensor.lastIndexOf(':');
    if (at > 0 && byName.has(tensor.slice(0, at))) {
      throw new UsageError('E_READOUT_MAP', `--readout "${tensor}" picks one unit, and ${map.source} picks the units too`, { hint: `give the tensor alone (--readout ${tensor.slice(0, at)}); to measure one category, keep only it in the map` });
    }
    const near = closestHint(tensor, [...model.outputs, ...byName.keys()]);
    throw new UsageError('E_SENSE_READOUT', `--readout "${tensor}" does not exist in ${model.fileName} (outputs: ${model.outputs.join(', ')}${near ? `; ${near}` : ''})`);
  }
  const width = layer.elements;
  if (layer.shape.length === 0 || width !== layer.shape[0]) {
    throw new UsageError('E_SENSE_READOUT', `--readout "${tensor}" has shape [${layer.shape.join(', ')}] per stimulus; a readout must be one vector of units per stimulus`, { hint: 'pick the logits or another [N, K] output' });
  }
  const resolved = resolveReadoutMap(map, { tensor, width, names: readoutUnitNames(model, tensor, width) });
  const scored = withCategoryScores(model, tensor, resolved.groups);
  const mappedInspection = await inspectModel(scored.model, inputShape ? { inputShape } : {});
  return {
    model: scored.model,
    inspection: mappedInspection,
    readout: { tensor: scored.output, units: resolved.categories.map((_, g) => g), categories: [...resolved.categories] },
    map: resolved,
  };
}
