/**
 * The plan of a cued-detection set: which glyph kinds each display holds. Displays come in pairs that
 * share the same "other" kinds (0 to maxGlyphs − 1 kinds other than the cue); one display of the pair
 * adds the cued kind, the other adds a glyph-sized decoy fragment in its place. So exactly half the
 * displays contain the cue, every other kind appears equally often in both halves (exact balance), and
 * the two halves hold the same number of objects. The order is then shuffled.
 */
import type { Random } from '../../random.js';
import type { DemoKind } from './glyphs.js';

/** What one display must contain. */
export interface DisplayPlan {
  /** Glyph kinds to draw, each once. */
  kinds: DemoKind[];
  /** Whether a decoy replaces the cued glyph (true exactly in the cue-absent displays). */
  substitute: boolean;
}

/**
 * Builds the plan of a cued set of `count` displays (`count` even; checked by resolveDisplayOptions).
 * `kinds` must contain `cued`. Draws only from `random`.
 */
export function planCuedSet(random: Random, count: number, kinds: readonly DemoKind[], cued: DemoKind, maxGlyphs: number): DisplayPlan[] {
  const others = kinds.filter((kind) => kind !== cued);
  const maxOthers = Math.min(maxGlyphs - 1, others.length);
  const plans: DisplayPlan[] = [];
  for (let pair = 0; pair < count / 2; pair++) {
    const chosen = chooseDistinct(random, others, random.int(maxOthers + 1));
    plans.push({ kinds: [cued, ...chosen], substitute: false });
    plans.push({ kinds: [...chosen], substitute: true });
  }
  shuffleInPlace(random, plans);
  return plans;
}

/** `n` distinct items of `items` in random order (partial Fisher–Yates); n ≤ items.length. */
export function chooseDistinct<T>(random: Random, items: readonly T[], n: number): T[] {
  const pool = [...items];
  for (let i = 0; i < n; i++) {
    const j = i + random.int(pool.length - i);
    const swap = pool[i]!;
    pool[i] = pool[j]!;
    pool[j] = swap;
  }
  return pool.slice(0, n);
}

/** Fisher–Yates shuffle (Durstenfeld's in-place form). */
export function shuffleInPlace<T>(random: Random, items: T[]): void {
  for (let i = items.length - 1; i > 0; i--) {
    const j = random.int(i + 1);
    const swap = items[i]!;
    items[i] = items[j]!;
    items[j] = swap;
  }
}
