import { RuntimeFailure } from '../errors.js';
import type { LayerBatch } from '../snapshot/snapshot.js';

/** Two row-aligned slices of one layer from two snapshots. */
export interface AlignedRows {
  /** Global index of the first row. */
  first: number;
  rows: number;
  /** rows × E activations (or rows × C channel means when activations are absent). */
  a: Float32Array;
  b: Float32Array;
  aMeans: Float32Array;
  bMeans: Float32Array;
}

/**
 * Walks two layer streams in step, re-cutting record batches so both sides cover the same stimuli
 * (snapshots recorded with different `--batch` sizes have different batch boundaries). Slices are
 * views; nothing is copied. `width` is E when activations are read, else C.
 * @throws RuntimeFailure when the streams hold different stimuli or end at different places.
 */
export async function* alignBatches(
  left: AsyncGenerator<LayerBatch>,
  right: AsyncGenerator<LayerBatch>,
  width: number,
  channels: number,
  label: string,
): AsyncGenerator<AlignedRows> {
  let a: LayerBatch | null = null;
  let b: LayerBatch | null = null;
  let aAt = 0;
  let bAt = 0;
  for (;;) {
    if (!a || aAt >= a.rows) {
      const next = await left.next();
      a = next.done ? null : next.value;
      aAt = 0;
    }
    if (!b || bAt >= b.rows) {
      const next = await right.next();
      b = next.done ? null : next.value;
      bAt = 0;
    }
    if (!a && !b) return;
    if (!a || !b) throw new RuntimeFailure('E_PAIRING', `layer "${label}" holds more stimuli in one snapshot than in the other`);
    const rows = Math.min(a.rows - aAt, b.rows - bAt);
    const first = a.index[aAt]!;
    if (b.index[bAt] !== first || a.index[aAt + rows - 1] !== b.index[bAt + rows - 1]) {
      throw new RuntimeFailure('E_PAIRING', `layer "${label}": stimulus order differs between the snapshots (index ${first} vs ${b.index[bAt]})`);
    }
    const values = (batch: LayerBatch, at: number) => (batch.activation ? batch.activation.subarray(at * width, (at + rows) * width) : batch.channelMeans.subarray(at * channels, (at + rows) * channels));
    yield {
      first,
      rows,
      a: values(a, aAt),
      b: values(b, bAt),
      aMeans: a.channelMeans.subarray(aAt * channels, (aAt + rows) * channels),
      bMeans: b.channelMeans.subarray(bAt * channels, (bAt + rows) * channels),
    };
    aAt += rows;
    bAt += rows;
  }
}
