/**
 * NaN/±Infinity bookkeeping of a recording. Every layer's produced values (and the stimuli fed to the
 * network) are counted as they are written; the counts go into the manifest (`layers[].nonFinite`,
 * `stimuli.nonFinite`) and, when any is non-zero, into one warning line at the end of the recording.
 * Checkpoints carry the counts so far, so a resumed recording reports the whole run's counts.
 */
import type { ActivationDtype, SnapshotManifest } from '../snapshot/manifest.js';

/**
 * Smallest magnitude that float16 storage turns into ±Infinity: the largest finite binary16 value is
 * 65504 and the next step would be 65536, so round-to-nearest-even sends everything from the midpoint
 * 65520 up to ±Infinity (IEEE 754-2008 binary16: 5 exponent bits, 10 fraction bits).
 */
export const FLOAT16_OVERFLOW = 65520;

/** Key of the stimuli (the network input) in a tally, next to the layer files. */
export const STIMULI_KEY = 'stimuli';

/**
 * Counts the elements of `data[start, end)` that are NaN or ±Infinity, or whose magnitude is at least
 * `bound` (pass `FLOAT16_OVERFLOW` for values stored as float16; the default counts only non-finite
 * values). One pass finds the largest magnitude (NaN propagates through Math.max); a second, counting
 * pass runs only when that pass finds something.
 * @returns the count; 0 for an empty range.
 */
export function countNonFinite(data: Float32Array, start = 0, end = data.length, bound = Number.POSITIVE_INFINITY): number {
  let largest = 0;
  for (let i = start; i < end; i++) largest = Math.max(largest, Math.abs(data[i]!));
  if (largest < bound) return 0;
  let count = 0;
  for (let i = start; i < end; i++) if (!(Math.abs(data[i]!) < bound)) count++;
  return count;
}

/** The bound for values stored in `dtype` with `keep` (`full` float16 activations overflow at 65520). */
export function storageBound(dtype: ActivationDtype, keep: 'full' | 'channels'): number {
  return dtype === 'float16' && keep === 'full' ? FLOAT16_OVERFLOW : Number.POSITIVE_INFINITY;
}

/** Running counts per key (layer file, or `STIMULI_KEY`). */
export class NonFiniteTally {
  private readonly counts = new Map<string, number>();

  /** @param restored counts of a checkpoint to continue from. */
  constructor(restored?: Readonly<Record<string, number>>) {
    for (const [key, value] of Object.entries(restored ?? {})) this.counts.set(key, value);
  }

  /** Adds `count` to `key`. */
  add(key: string, count: number): void {
    this.counts.set(key, (this.counts.get(key) ?? 0) + count);
  }

  /** The count of `key` (0 when never added). */
  get(key: string): number {
    return this.counts.get(key) ?? 0;
  }

  /** The counts as a plain object (for a checkpoint). */
  toRecord(): Record<string, number> {
    return Object.fromEntries(this.counts);
  }
}

/**
 * The one-line warning for a finished manifest, or null when every count is 0 (or none was taken).
 * Names up to four layers with their counts, the stimuli's own count, and what it means for `diff`.
 */
export function nonFiniteNotice(manifest: SnapshotManifest): string | null {
  const layers = manifest.layers.filter((l) => (l.nonFinite ?? 0) > 0);
  const stimuli = manifest.stimuli.nonFinite ?? 0;
  if (layers.length === 0 && stimuli === 0) return null;
  const shown = layers.slice(0, 4).map((l) => `${l.name} ${l.nonFinite}`).join(', ');
  const more = layers.length > 4 ? `, and ${layers.length - 4} more` : '';
  const where = layers.length > 0 ? `in ${layers.length} of ${manifest.layers.length} recorded layers (${shown}${more})` : 'in no recorded layer';
  const fed = stimuli > 0 ? `; the stimuli themselves hold ${stimuli}` : '';
  const half = layers.some((l) => l.dtype === 'float16' && l.keep === 'full') ? ' (float16 storage turns values beyond ±65504 into ±Infinity)' : '';
  return `warning: NaN/±Infinity values ${where}${fed}${half}; counts are in manifest.json, and diff gives no verdict on such data`;
}
