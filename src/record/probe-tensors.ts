/**
 * Probing a model's tensors in slices: each slice of tensors is exposed in a session of its own, so the
 * runtime never holds every exposed tensor of a large network at once. A runtime keeps every graph
 * output of a run allocated until the run ends, fetched or not, so fetching in groups from one session
 * over the fully exposed model does not bound the memory; separate sessions do.
 */
import type { LoadedModel } from '../graph/load-model.js';
import { exposeTensors } from '../graph/instrument.js';
import { ELEMENT_BYTES, probeOutputs, type FloatTensor } from '../session/network-session.js';

/** Bytes of exposed tensors (at the probe batch) one probe session aims to hold. */
export const PROBE_SESSION_BYTES = 768 * 2 ** 20;

/** Element type and dims of each probed tensor (and of the model's declared outputs). */
export type ProbedShapes = Map<string, { type: string; dims: number[] }>;

/** Options of `probeTensors`. */
export interface ProbeOptions {
  /** Bytes of exposed tensors one session aims to hold; default `PROBE_SESSION_BYTES`. */
  sessionBytes?: number;
  /**
   * How many of the first `names` are known to be small (e.g. constants computed from shapes): they go
   * with the first slice and do not count in the sizes. Default 0.
   */
  small?: number;
  /** Bytes of a tensor at this probe when known beforehand (e.g. from an earlier probe); the rest are estimated. */
  sizeOf?: (name: string) => number | undefined;
  /** Called after each slice with the tensors probed so far and the total, for progress. */
  onSlice?: (done: number, total: number) => void;
}

/**
 * Runs the model on `feeds` with `names` exposed, a slice of them per session, in the order given
 * (topological order keeps neighbouring tensors, of similar size, together). Tensors of known size
 * (`sizeOf`) count as they are; the others, in the first slice, as if each were as large as the input,
 * then at the mean size seen so far, or in the slice just probed when that is larger. The result is
 * the same as one probe of every name.
 */
export async function probeTensors(model: LoadedModel, names: readonly string[], feeds: Record<string, FloatTensor>, label: string, options: ProbeOptions = {}): Promise<ProbedShapes> {
  const budget = options.sessionBytes ?? PROBE_SESSION_BYTES;
  const small = Math.min(options.small ?? 0, names.length);
  const shapes: ProbedShapes = new Map();
  let perTensor = Object.values(feeds).reduce((sum, t) => sum + t.data.byteLength, 0);
  let seenBytes = 0;
  let seen = 0;
  for (let at = 0; at < names.length; ) {
    const free = at === 0 ? small : 0;
    // add tensors while the slice's known or estimated bytes stay within the budget (at least one)
    let count = 0;
    for (let planned = 0; at + free + count < names.length; count++) {
      const bytes = options.sizeOf?.(names[at + free + count]!) ?? perTensor;
      if (count > 0 && planned + bytes > budget) break;
      planned += bytes;
    }
    const slice = names.slice(at, at + free + count);
    const probed = await probeOutputs(exposeTensors(model, slice), feeds, label);
    let sliceBytes = 0;
    for (const name of slice.slice(free)) {
      const found = probed.get(name);
      if (found) sliceBytes += found.dims.reduce((a, b) => a * b, 1) * (ELEMENT_BYTES[found.type] ?? 8);
    }
    for (const [name, found] of probed) shapes.set(name, found);
    at += slice.length;
    seen += count;
    seenBytes += sliceBytes;
    perTensor = Math.max(seenBytes / seen, sliceBytes / Math.max(1, count));
    options.onSlice?.(at, names.length);
  }
  return shapes;
}
