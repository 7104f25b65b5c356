/**
 * Sharding: a deterministic split of a list (stimuli, sweep cells) into N contiguous, balanced parts, so
 * that N independent processes — typically the tasks of a cluster job array — each do one part and a
 * merge joins them. Shard K of N (1-based) covers the half-open index range
 *
 *   [floor((K − 1)·count / N), floor(K·count / N))
 *
 * so the parts are disjoint, cover 0..count−1 in order, and their sizes differ by at most one. The split
 * depends only on K, N and count, never on the machine or on timing.
 */
import { UsageError } from '../errors.js';

/** Shard K of N, 1-based. */
export interface ShardSpec {
  /** K, 1 ≤ K ≤ N. */
  index: number;
  /** N ≥ 1. */
  count: number;
}

/** The items of one shard: indices [start, end). */
export interface ShardRange {
  start: number;
  end: number;
}

/**
 * Parses `K/N` (e.g. `3/8`).
 * @param text the option value.
 * @param option the option's name, for messages (default `--shard`).
 * @returns K and N.
 * @throws UsageError unless the text is two positive integers with K ≤ N.
 */
export function parseShard(text: string, option = '--shard'): ShardSpec {
  const match = /^\s*(\d+)\s*\/\s*(\d+)\s*$/.exec(text);
  if (!match) throw new UsageError('E_SHARD', `${option} must be K/N with 1 ≤ K ≤ N (e.g. 2/8), got ${JSON.stringify(text)}`);
  const index = Number(match[1]);
  const count = Number(match[2]);
  if (!Number.isSafeInteger(count) || count < 1 || index < 1 || index > count) {
    throw new UsageError('E_SHARD', `${option} ${text.trim()}: K must be between 1 and N (shards are numbered from 1)`, {
      hint: 'with a Slurm array --array=1-N use --shard $SLURM_ARRAY_TASK_ID/N',
    });
  }
  return { index, count };
}

/**
 * The index range of shard `k` of `n` over `count` items (see the file comment for the formula).
 * @param k shard number, 1-based.
 * @param n number of shards.
 * @param count number of items.
 * @returns [start, end), never empty.
 * @throws UsageError when k or n is not a valid shard number, or a shard would be empty (count < n).
 */
export function shardRange(k: number, n: number, count: number): ShardRange {
  if (!Number.isSafeInteger(n) || n < 1 || !Number.isSafeInteger(k) || k < 1 || k > n) {
    throw new UsageError('E_SHARD', `shard ${k}/${n}: K must be an integer between 1 and N`);
  }
  if (!Number.isSafeInteger(count) || count < 0) throw new UsageError('E_SHARD', `shard ${k}/${n}: item count ${count} is not a non-negative integer`);
  if (count < n) {
    throw new UsageError('E_SHARD', `--shard ${k}/${n}: ${count} items cannot be split into ${n} non-empty shards`, { hint: `use at most ${Math.max(count, 1)} shards` });
  }
  // exact in doubles for count·n < 2^53
  return { start: Math.floor(((k - 1) * count) / n), end: Math.floor((k * count) / n) };
}
