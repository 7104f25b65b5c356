/**
 * What a sensitivity measurement covers, decided before anything runs: the readout tensor and its units
 * (`OUTPUT[:CATEGORY|INDEX]`), the site tensors (`all-activations` or names), and which stimuli enter
 * each category's average.
 */
import { UsageError, closestHint, nameList } from '../errors.js';
import type { LoadedModel } from '../graph/load-model.js';
import { ACTIVATION_OPS } from '../graph/select.js';
import { readSidecar } from '../graph/sidecar.js';
import { extractTail, type TailGraph } from '../graph/tail.js';
import type { ModelInspection } from '../record/inspect-model.js';
import { siteShapes } from '../record/record-modulated.js';

/** The `site` value that selects every default-recorded activation output with a channel axis. */
export const ALL_ACTIVATIONS = 'all-activations';
export interface ReadoutChoice {
  /** Output tensor name. */
  tensor: string;
  /** Unit indices of the chosen categories. */
  units: number[];
  /** Category names (sidecar kinds, or unit index as text), one per unit. */
  categories: string[];
}

/**
 * Parses `OUTPUT[:CATEGORY|INDEX]` against a model. A name that is itself a tensor wins over a split at
 * the last ':' (tensor names may contain colons).
 * @param text the option value; undefined means the sidecar's readout (`outputs.name`) when the model has
 *   that tensor, else the first graph output; every unit.
 * @param model the model (its sidecar names the units of `outputs.name`).
 * @param inspection the inspected model (readout shapes).
 * @returns the tensor, unit indices and category names.
 * @throws UsageError when the tensor does not exist (closest names), is not one vector per stimulus, or
 *   the category / index is not one of its units.
 */
export function parseReadout(text: string | undefined, model: LoadedModel, inspection: ModelInspection): ReadoutChoice {
  const names = new Set(inspection.layers.map((l) => l.name));
  // default: the readout the sidecar names (e.g. fitted heads), else the first graph output
  const named = readSidecar(model.path)?.outputs?.name;
  let tensor = text ?? (named !== undefined && names.has(named) ? named : model.outputs[0] ?? '');
  let unit: string | undefined;
  if (text !== undefined && !names.has(text) && text.includes(':')) {
    const at = text.lastIndexOf(':');
    tensor = text.slice(0, at);
    unit = text.slice(at + 1);
  }
  if (!names.has(tensor)) {
    const near = closestHint(tensor, [...model.outputs, ...names]);
    throw new UsageError('E_SENSE_READOUT', `--readout "${text ?? tensor}": tensor "${tensor}" does not exist in ${model.fileName} (outputs: ${model.outputs.join(', ')}${near ? `; ${near}` : ''})`);
  }
  const layer = inspection.layers.find((l) => l.name === tensor)!;
  const units = layer.elements;
  if (layer.shape.length === 0 || units !== layer.shape[0]) {
    throw new UsageError('E_SENSE_READOUT', `--readout "${tensor}" has shape [${layer.shape.join(', ')}] per stimulus; a readout must be one vector of units per stimulus`, { hint: 'pick the logits or another [N, K] output' });
  }
  const sidecar = readSidecar(model.path);
  if (sidecar?.outputs && sidecar.outputs.name === tensor && sidecar.outputs.kinds.length !== units) {
    // a partial list cannot say which unit is which category: refuse rather than fall back to indices silently
    throw new UsageError('E_SENSE_READOUT', `the sidecar of ${model.fileName} names ${sidecar.outputs.kinds.length} kinds (${nameList(sidecar.outputs.kinds.map(String), 4)}) for the ${units} units of "${tensor}"; it needs one kind per unit`, {
      hint: 'group the units into your stimulus categories with --readout-map, fit one readout unit per category with `sonde heads` and use that model, or list a kind for every unit in outputs.kinds',
    });
  }
  const kinds = sidecar?.outputs && sidecar.outputs.name === tensor ? sidecar.outputs.kinds.map(String) : null;
  const namesOfUnits = kinds ?? Array.from({ length: units }, (_, i) => String(i));
  if (unit === undefined) return { tensor, units: namesOfUnits.map((_, i) => i), categories: namesOfUnits };
  let index = namesOfUnits.indexOf(unit);
  if (index < 0 && /^\d+$/.test(unit) && Number(unit) < units) index = Number(unit);
  if (index < 0) {
    const near = closestHint(unit, namesOfUnits);
    throw new UsageError('E_SENSE_READOUT', `--readout "${text}": "${unit}" is not a unit of "${tensor}" (${units} units${kinds ? `: ${nameList(kinds)}` : `, indices 0–${units - 1}`}${near ? `; ${near}` : ''})`);
  }
  return { tensor, units: [index], categories: [namesOfUnits[index]!] };
}

/**
 * The site tensors to measure: explicit names, or `all-activations` (every default-recorded
 * activation-function output with a channel axis that lies upstream of the readout).
 * @throws UsageError for an unknown name (closest names), a tensor without a channel axis, or when
 *   `all-activations` finds none.
 */
export function chooseSites(site: string | readonly string[], inspection: ModelInspection, readout: string): string[] {
  const shapes = siteShapes(inspection.layers);
  const list = typeof site === 'string' ? [site] : [...site];
  if (list.length === 1 && list[0] === ALL_ACTIVATIONS) {
    const found = inspection.layers.filter((l) => l.default && ACTIVATION_OPS.has(l.op) && shapes.has(l.name) && l.name !== readout && isUpstream(inspection, l.name, readout)).map((l) => l.name);
    if (found.length === 0) throw new UsageError('E_SENSE_SITE', `--site ${ALL_ACTIVATIONS}: ${inspection.model.fileName} has no activation output with a channel axis upstream of "${readout}"`);
    return found;
  }
  if (list.length === 0) throw new UsageError('E_SENSE_SITE', '--site names no tensor');
  for (const name of list) {
    if (shapes.has(name)) continue;
    const layer = inspection.layers.find((l) => l.name === name);
    if (layer) {
      throw new UsageError('E_SENSE_SITE', `--site "${name}" has no feature axis (shape [${layer.shape.join(', ')}] per stimulus); a site must be [N, C], [N, C, H, W] or tokens [N, T, D]`, { hint: 'pick a feature map, a token tensor or a vector layer' });
    }
    const near = closestHint(name, inspection.layers.map((l) => l.name));
    throw new UsageError('E_SENSE_SITE', `--site "${name}" not found (model has ${inspection.layers.length} recordable tensors${near ? `; ${near}` : ''})`);
  }
  return list;
}

function isUpstream(inspection: ModelInspection, site: string, readout: string): boolean {
  const seen = new Set<string>();
  const queue = [site];
  while (queue.length > 0) {
    const tensor = queue.pop()!;
    for (const consumer of inspection.structure.consumers.get(tensor) ?? []) {
      for (const out of inspection.structure.nodes[consumer]!.outputs) {
        if (out === readout) return true;
        if (!seen.has(out)) {
          seen.add(out);
          queue.push(out);
        }
      }
    }
  }
  return false;
}

/**
 * Averaging weights: w[s*K + c] = 1 when stimulus s enters category c's average.
 * @param labels per-stimulus label lists.
 * @param categories the readout categories.
 * @param stimuliOf undefined (every stimulus), a category, or `each`.
 * @returns the weights and the count per category.
 * @throws UsageError when labels are needed but absent, or a category has no stimuli.
 */
export function stimulusWeights(labels: readonly (readonly string[])[], categories: readonly string[], stimuliOf: string | undefined): { weights: Uint8Array; counts: Int32Array } {
  const N = labels.length;
  const K = categories.length;
  const weights = new Uint8Array(N * K);
  const counts = new Int32Array(K);
  const present = [...new Set(labels.flat())].sort();
  if (stimuliOf !== undefined && present.length === 0) {
    throw new UsageError('E_SENSE_STIMULI_OF', `--stimuli-of ${stimuliOf}: the stimuli carry no labels`, { hint: 'give labelled stimuli (class folders, a path,label CSV, or --labels for .npy)' });
  }
  if (stimuliOf !== undefined && stimuliOf !== 'each' && !present.includes(stimuliOf)) {
    const near = closestHint(stimuliOf, present);
    throw new UsageError('E_SENSE_STIMULI_OF', `--stimuli-of "${stimuliOf}": no stimulus carries this category (labels: ${present.join(', ')}${near ? `; ${near}` : ''})`);
  }
  for (let s = 0; s < N; s++) {
    const own = labels[s]!;
    for (let c = 0; c < K; c++) {
      const use = stimuliOf === undefined ? true : stimuliOf === 'each' ? own.includes(categories[c]!) : own.includes(stimuliOf);
      if (use) {
        weights[s * K + c] = 1;
        counts[c]++;
      }
    }
  }
  for (let c = 0; c < K; c++) {
    if (counts[c] === 0) {
      const near = closestHint(categories[c]!, present);
      throw new UsageError('E_SENSE_STIMULI_OF', `--stimuli-of each: readout category "${categories[c]}" has no stimuli containing it (labels: ${present.join(', ')}${near ? `; ${near}` : ''})`, {
        hint: 'the readout categories must be label names: group the readout\'s units into label categories with --readout-map (e.g. dog=151..268;cat=281..285), or pick one readout category with --readout OUTPUT:CATEGORY',
      });
    }
  }
  return { weights, counts };
}

/**
 * The part of the network downstream of `site` that computes `readout`, with every boundary tensor a
 * recordable activation (or the data input): tensors the downstream part reads that are not per-stimulus
 * activations — shape computations such as a Reshape target built from Shape(input) — are recomputed
 * inside it from their own inputs, repeatedly, until every fed tensor can be fed.
 * @returns the tail, or null when nothing downstream of the site computes the readout.
 */
export function siteTail(inspection: ModelInspection, site: string, readout: string): TailGraph | null {
  const model = inspection.model;
  const recordable = new Set(inspection.layers.map((l) => l.name));
  const recompute = new Set<string>();
  for (;;) {
    const tail = extractTail(model, inspection.structure, [site], [readout], recompute);
    if (!tail) return null;
    const missing = tail.boundary.filter((name) => name !== site && name !== model.input.name && !recordable.has(name) && !recompute.has(name) && inspection.structure.producer.has(name));
    if (missing.length === 0) return tail;
    for (const name of missing) recompute.add(name);
  }
}
