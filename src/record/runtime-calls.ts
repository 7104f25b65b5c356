/**
 * How a recording feeds the runtime: the runtime calls of a run (batches split by the bytes a call
 * holds) and the stimulus reader that turns a range of stimuli into input feeds, logging each
 * stimulus's digest and non-finite count as it goes.
 */
import { createHash } from 'node:crypto';
import { evenRows, HEAP_BLOCK_BYTES, runBytesOption, runRowBytes, rowsWithin } from '../graph/run-memory.js';
import type { LoadedModel } from '../graph/load-model.js';
import type { FloatTensor } from '../session/network-session.js';
import { STIMULUS_DIGEST_BYTES } from '../snapshot/stimuli-file.js';
import type { StimulusSource } from '../stimuli/source.js';
import { countNonFinite } from './non-finite.js';

/** One batch of network feeds, covering stimuli [first, first + rows). */
export interface FeedBatch {
  first: number;
  rows: number;
  feeds: Record<string, FloatTensor>;
}

/**
 * Rows per runtime call: a fixed-batch model's batch; otherwise as many of a batch as keep the call's
 * tensors — the fed stimuli, every exposed output, the largest node's working set (graph/run-memory.ts) —
 * within the run-bytes budget (`runBytes`, default 512 MiB), so that peak memory does not grow with the
 * batch size or the bytes of the recorded layers; and few enough that every fetched tensor of a call
 * fits in a reused heap block (`HEAP_BLOCK_BYTES`), so that the runtime's outputs do not come from
 * freshly mapped memory at every call. The batch is split into calls of about the same size.
 */
export function callRows(run: { model: LoadedModel; fetched: readonly string[]; inputElements: number; elements: (tensor: string) => number | undefined; batch: number; fixedBatch: number | null; runBytes?: number | undefined }): number {
  if (run.fixedBatch !== null) return run.fixedBatch;
  const rowBytes = runRowBytes(run.model, (name) => (name === run.model.input.name ? run.inputElements : run.elements(name)), { fed: [run.model.input.name], fetched: run.fetched });
  let largest = 0;
  for (const name of run.fetched) largest = Math.max(largest, 4 * (run.elements(name) ?? 0));
  const cap = Math.min(rowsWithin(runBytesOption(run.runBytes), rowBytes, run.batch), rowsWithin(HEAP_BLOCK_BYTES, largest, run.batch));
  return evenRows(run.batch, cap);
}

/**
 * The runtime calls of local rows [from, total): each batch of `batch` rows (batch k covers
 * [k·batch, (k+1)·batch)) split into calls of at most `perCall` rows.
 * @param from where the recording continues (a multiple of `batch`, or `total`).
 */
export function runtimeCalls(from: number, total: number, batch: number, perCall: number): Array<{ first: number; rows: number }> {
  const calls: Array<{ first: number; rows: number }> = [];
  for (let start = from; start < total; start += batch) {
    const end = Math.min(total, start + batch);
    for (let first = start; first < end; first += perCall) calls.push({ first, rows: Math.min(perCall, end - first) });
  }
  return calls;
}

/**
 * Reads stimuli of `range` as input feeds (`local` rows from the start of the range), and stores the
 * SHA-256 of each stimulus's exact input bytes at its local row in `digests`.
 */
export function stimulusBatches(source: StimulusSource, fixedBatch: number | null, range: { start: number; end: number }, inputName: string, shape: [number, number, number], digests: Uint8Array, extraFeeds: ((firstStimulus: number, rows: number) => Record<string, FloatTensor>) | undefined, nonFinite: Uint32Array) {
  const [c, h, w] = shape;
  const per = c * h * w;
  return async (local: number, rows: number): Promise<FeedBatch> => {
    const first = range.start + local;
    const padded = fixedBatch ?? rows;
    const data = new Float32Array(padded * per); // zero padding for fixed-batch models
    await source.read(first, rows, data);
    for (let r = 0; r < rows; r++) {
      const digest = createHash('sha256').update(new Uint8Array(data.buffer, r * per * 4, per * 4)).digest();
      digests.set(digest, (first - range.start + r) * STIMULUS_DIGEST_BYTES);
      nonFinite[first - range.start + r] = countNonFinite(data, r * per, (r + 1) * per);
    }
    const feeds: Record<string, FloatTensor> = { [inputName]: { data, dims: [padded, c, h, w] } };
    if (extraFeeds) Object.assign(feeds, extraFeeds(first, padded));
    return { first, rows, feeds };
  };
}
