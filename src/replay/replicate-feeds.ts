/**
 * Feeds for a tail replay of M modulation patterns at once: every baseline boundary tensor of one
 * batch repeated M times along the batch axis (row m·rows + i is stimulus i under pattern m).
 */
import { RuntimeFailure } from '../errors.js';
import type { FloatTensor } from '../session/network-session.js';
import type { LayerBatch, Snapshot } from '../snapshot/snapshot.js';

/**
 * Builds the replicated boundary feeds of one batch.
 * @param parts the next result of each boundary layer's stream, in `boundary` order.
 * @param boundary names of the boundary tensors the tail reads.
 * @param rawSites boundary tensors that are modulation sites: they feed `NAME::raw` (the injected input).
 * @param M how many patterns share the run.
 * @param baseline the snapshot the streams read (for shapes and messages).
 * @returns the batch's rows, its first batch (for the stimulus index) and the feeds.
 * @throws RuntimeFailure when a stream ends early or the layers are not aligned.
 */
export function replicateBoundaryFeeds(
  parts: ReadonlyArray<IteratorResult<LayerBatch>>,
  boundary: readonly string[],
  rawSites: ReadonlySet<string>,
  M: number,
  baseline: Snapshot,
): { rows: number; firstBatch: LayerBatch; feeds: Record<string, FloatTensor> } {
  const batches = alignedBoundary(parts, boundary, baseline);
  const rows = batches[0]!.rows;
  return { rows, firstBatch: batches[0]!, feeds: replicateRows(batches, boundary, rawSites, baseline, 0, rows, M) };
}

/**
 * The next batch of every boundary stream, checked to hold the same stimuli.
 * @throws RuntimeFailure when a stream ends early or the layers are not aligned.
 */
export function alignedBoundary(parts: ReadonlyArray<IteratorResult<LayerBatch>>, boundary: readonly string[], baseline: Snapshot): LayerBatch[] {
  const firstBatch = parts[0]!.value as LayerBatch | undefined;
  if (!firstBatch) throw new RuntimeFailure('E_LAYER_READ', `baseline ${baseline.folder} ended early`);
  return parts.map((part, i) => {
    const batch = part.value as LayerBatch | undefined;
    if (!batch || batch.rows !== firstBatch.rows || batch.index[0] !== firstBatch.index[0] || !batch.activation) throw new RuntimeFailure('E_LAYER_READ', `baseline layer "${boundary[i]}" is not aligned with the others`);
    return batch;
  });
}

/**
 * Feeds of rows [i0, i0 + rows) of aligned boundary batches, repeated M times along the batch axis
 * (row m·rows + i is stimulus i0 + i under pattern m); sites feed `NAME::raw`.
 */
export function replicateRows(batches: readonly LayerBatch[], boundary: readonly string[], rawSites: ReadonlySet<string>, baseline: Snapshot, i0: number, rows: number, M: number): Record<string, FloatTensor> {
  const feeds: Record<string, FloatTensor> = {};
  batches.forEach((batch, i) => {
    const name = boundary[i]!;
    const per = batch.activation!.length / batch.rows;
    const source = batch.activation!.subarray(i0 * per, (i0 + rows) * per);
    const replicated = new Float32Array(M * rows * per);
    for (let m = 0; m < M; m++) replicated.set(source, m * rows * per);
    feeds[rawSites.has(name) ? `${name}::raw` : name] = { data: replicated, dims: [M * rows, ...baseline.layer(name).shape] };
  });
  return feeds;
}
