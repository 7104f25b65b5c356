/**
 * How many rows (stimuli, or stimulus × pattern copies) one runtime call may take so that the tensors
 * it holds stay within a byte budget: the replays of `record --modulate --from`, `sweep` and `sense`
 * split their batches by bytes, not by a row count, so that their peak memory does not grow with the
 * number of gain vectors or readout categories that share a call, nor with the size of the network's
 * maps at the site.
 *
 * The estimate is made from the probed per-stimulus sizes of the tensors (float32, 4 bytes an element)
 * and is deliberately on the high side:
 * - inputs: each fed array lives twice (the caller's, and the copy the runtime's worker thread gets);
 * - fetched outputs: twice (the call's result, and the previous call's, still being written or scored);
 * - forward only: the largest node working set (its non-weight inputs and outputs together): the
 *   runtime's memory planner reuses the buffers of tensors no later node reads;
 * - forward and backward (`sense` gradients): every tensor the forward part computes is kept for the
 *   backward part, and the backward part holds about as much again in gradients.
 */
import { UsageError } from '../errors.js';
import type { LoadedModel } from './load-model.js';

/** Default bytes of tensors one replay call may hold (about the activations of a large image network at batch 16). */
export const DEFAULT_RUN_BYTES = 512 * 2 ** 20;

/** What a runtime call over `model` feeds and fetches. */
export interface RunTensors {
  /** Graph inputs fed per row (data tensors; per-row modulation inputs count too). */
  fed: readonly string[];
  /** Outputs fetched per row. */
  fetched: readonly string[];
  /** The call also runs a backward pass through every tensor it computes (gradient graphs). */
  backward?: boolean;
}

/**
 * Estimated bytes one row of a call over `model` holds at the call's peak.
 * @param elements per-stimulus element count of a tensor, or undefined when it is not known
 *   (weights, shape arithmetic: counted as 0).
 */
export function runRowBytes(model: LoadedModel, elements: (tensor: string) => number | undefined, run: RunTensors): number {
  const size = (name: string): number => 4 * (elements(name) ?? 0);
  let fed = 0;
  for (const name of run.fed) fed += size(name);
  let fetched = 0;
  for (const name of run.fetched) fetched += size(name);
  let working = 0;
  let kept = 0;
  for (const node of model.proto.graph?.node ?? []) {
    let bytes = 0;
    for (const name of node.input ?? []) if (name) bytes += size(name);
    for (const name of node.output ?? []) {
      if (!name) continue;
      bytes += size(name);
      kept += size(name);
    }
    if (bytes > working) working = bytes;
  }
  return 2 * fed + 2 * fetched + (run.backward ? 2 * kept + working : working);
}

/**
 * The largest block glibc's malloc takes from its reused heap rather than mapping afresh: its mmap
 * threshold starts at 128 KiB and rises, as mapped blocks are freed, to at most 32 MiB on 64-bit
 * systems (DEFAULT_MMAP_THRESHOLD_MAX = 4 MiB × sizeof(long); glibc malloc/malloc.c, mallopt(3)).
 * A larger block is mapped when allocated and unmapped when freed, so each runtime call that returns
 * such a tensor pays a page fault per 4 KiB page of it again. Measured on VGG16 at 224 px (32 stimuli,
 * every default tensor fetched): calls of 3 stimuli (conv1's output 36.8 MB) took 3.00–3.44 s with
 * 182 000–328 000 faults, calls of 2 (24.5 MB) 2.85–2.96 s with 44 000–72 000, against 2.37–2.45 s
 * for the logits alone.
 */
export const HEAP_BLOCK_BYTES = 32 * 2 ** 20;

/**
 * Rows per call within `budget` bytes: ⌊budget / rowBytes⌋, at least `least` (a call cannot take less)
 * and at most `most`.
 */
export function rowsWithin(budget: number, rowBytes: number, most: number, least = 1): number {
  const fit = rowBytes > 0 ? Math.floor(budget / rowBytes) : most;
  return Math.max(least, Math.min(most, fit));
}

/**
 * Rows per call that split `total` rows into the fewest calls of at most `cap` rows, all about the same
 * size (⌈total / ⌈total / cap⌉⌉): 16 rows under a cap of 10 go as 8 + 8, not 10 + 6, so every call has
 * nearly the same shape and the runtime can reuse one memory plan.
 */
export function evenRows(total: number, cap: number): number {
  if (total <= 0) return Math.max(1, cap);
  const calls = Math.ceil(total / Math.max(1, Math.min(cap, total)));
  return Math.ceil(total / calls);
}

/**
 * The run-bytes budget of an option (bytes), or the default when undefined.
 * @throws UsageError E_RUN_MEMORY for a budget that is not a positive finite number.
 */
export function runBytesOption(bytes: number | undefined): number {
  if (bytes === undefined) return DEFAULT_RUN_BYTES;
  if (!Number.isFinite(bytes) || bytes <= 0) {
    throw new UsageError('E_RUN_MEMORY', `--run-memory must be a positive number of MB, got ${bytes / 2 ** 20}`, { hint: `the default is ${DEFAULT_RUN_BYTES / 2 ** 20} MB of tensors per runtime call` });
  }
  return bytes;
}
