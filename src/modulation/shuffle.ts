/**
 * The shuffled control's permutation: a pattern's per-channel values permuted across channels, so the
 * gains keep their distribution but lose any relation to the channels' tuning.
 */
import { createRandom } from '../random.js';

/**
 * A copy of `values` permuted across channels (Fisher–Yates with a stream seeded by seed, site and
 * category, so the same control is drawn wherever it is used).
 * @param values per-channel values (gains or tuning values).
 * @param seed the control seed; site, category: forks of the stream.
 */
export function shuffleChannels<T extends Float32Array | Float64Array>(values: T, seed: number, site: string, category: string): T {
  const shuffled = values.slice() as T;
  const rng = createRandom(seed).fork(site).fork(category);
  for (let i = shuffled.length - 1; i > 0; i--) {
    const j = rng.int(i + 1);
    const t = shuffled[i]!;
    shuffled[i] = shuffled[j]!;
    shuffled[j] = t;
  }
  return shuffled;
}
