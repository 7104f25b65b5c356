/**
 * The plan of a composed set: which category and which source image fills each slot of each composite.
 * Pure: categories and counts in, slots out, every draw from the given generator.
 *
 * - Without a cue every slot is filled from all categories; with a cue exactly half the composites
 *   (`count` even) hold the cued category in one slot, the other half never hold it.
 * - The other slots are filled least-used first (ties broken at random), separately in the cue-present
 *   and cue-absent halves, so within each half every non-cued category fills a number of slots that
 *   differs from any other's by at most 1; a composite holds distinct categories while there are enough.
 * - The cued category's slot cycles through the slot positions (overlay: which image gets the weight;
 *   grid: which cell), so positions are balanced too.
 * - Source images of a category are used in a shuffled cycle: each once before any twice.
 * - The order of the composites is shuffled last.
 */
import type { Random } from '../../random.js';
import { shuffleInPlace } from '../demo/cued-plan.js';

/** One slot: the category drawn and the index of the source image (into that category's list). */
export interface PlannedSlot {
  category: string;
  image: number;
}

/** Options of `planComposites`. */
export interface CompositePlanOptions {
  /** Source images per category (only the counts are used). */
  imagesPerCategory: ReadonlyMap<string, number>;
  /** Composites to plan. */
  count: number;
  /** Slots per composite (2 for an overlay, k² for a k×k grid). */
  slots: number;
  /** A category present in exactly half the composites, or null. */
  cued: string | null;
}

/**
 * Plans `count` composites (see the file comment). The caller has checked the options (categories with
 * images, the cue among them, an even count with a cue).
 */
export function planComposites(random: Random, options: CompositePlanOptions): PlannedSlot[][] {
  const categories = [...options.imagesPerCategory.keys()].sort();
  const pool = options.cued === null ? categories : categories.filter((c) => c !== options.cued);
  const cycles = new Map(categories.map((c) => [c, new ImageCycle(random.fork(`images:${c}`), options.imagesPerCategory.get(c)!)]));
  const present = options.cued === null ? 0 : options.count / 2;
  const groups: Array<{ n: number; cue: boolean; label: string }> = options.cued === null ? [{ n: options.count, cue: false, label: 'all' }] : [{ n: present, cue: true, label: 'present' }, { n: options.count - present, cue: false, label: 'absent' }];
  const plans: string[][] = [];
  for (const group of groups) {
    const fill = new LeastUsed(random.fork(`fill:${group.label}`), pool);
    for (let j = 0; j < group.n; j++) {
      const others = fill.take(group.cue ? options.slots - 1 : options.slots);
      shuffleInPlace(random, others);
      if (group.cue) others.splice(j % options.slots, 0, options.cued!);
      plans.push(others);
    }
  }
  shuffleInPlace(random, plans);
  return plans.map((slots) => slots.map((category) => ({ category, image: cycles.get(category)!.next() })));
}

/** Hands out the indices 0..n−1 in a shuffled order, reshuffled after each pass. */
class ImageCycle {
  private order: number[] = [];
  private at = 0;
  constructor(private readonly random: Random, private readonly n: number) {}
  next(): number {
    if (this.at === this.order.length) {
      this.order = Array.from({ length: this.n }, (_, i) => i);
      shuffleInPlace(this.random, this.order);
      this.at = 0;
    }
    return this.order[this.at++]!;
  }
}

/** Picks categories least used so far; distinct within one `take` while the pool allows. */
class LeastUsed {
  private readonly used: Map<string, number>;
  constructor(private readonly random: Random, private readonly pool: readonly string[]) {
    this.used = new Map(pool.map((c) => [c, 0]));
  }
  take(n: number): string[] {
    const chosen: string[] = [];
    while (chosen.length < n) {
      const round = new Set<string>();
      const order = [...this.pool];
      shuffleInPlace(this.random, order);
      // stable sort keeps the random order among equally used categories
      order.sort((a, b) => this.used.get(a)! - this.used.get(b)!);
      for (const category of order) {
        if (chosen.length === n) break;
        if (round.has(category)) continue;
        round.add(category);
        chosen.push(category);
        this.used.set(category, this.used.get(category)! + 1);
      }
    }
    return chosen;
  }
}
