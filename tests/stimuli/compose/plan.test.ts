import { describe, expect, it } from 'vitest';
import { createRandom } from '../../../src/random.js';
import { planComposites } from '../../../src/stimuli/compose/plan.js';

const images = new Map([['bird', 5], ['boat', 3], ['cat', 4], ['dog', 7], ['tree', 2]]);

function spread(counts: Map<string, number>, keys: string[]): number {
  const values = keys.map((k) => counts.get(k) ?? 0);
  return Math.max(...values) - Math.min(...values);
}

describe('planComposites', () => {
  it('planComposites with a cue puts it in exactly half the composites and balances the others within each half (spread ≤ 1)', () => {
    for (const [slots, count] of [[2, 40], [4, 30], [9, 12], [2, 2]] as const) {
      const plan = planComposites(createRandom(11), { imagesPerCategory: images, count, slots, cued: 'cat' });
      expect(plan).toHaveLength(count);
      const withCue = plan.filter((p) => p.some((s) => s.category === 'cat'));
      expect(withCue).toHaveLength(count / 2);
      for (const p of plan) expect(p.filter((s) => s.category === 'cat').length).toBeLessThanOrEqual(1);
      const others = ['bird', 'boat', 'dog', 'tree'];
      for (const half of [withCue, plan.filter((p) => !p.some((s) => s.category === 'cat'))]) {
        const counts = new Map<string, number>();
        for (const p of half) for (const s of p) if (s.category !== 'cat') counts.set(s.category, (counts.get(s.category) ?? 0) + 1);
        expect(spread(counts, others), `slots ${slots}`).toBeLessThanOrEqual(1);
      }
      // the cue's slot position is balanced too (cycled over positions)
      const positions = new Map<number, number>();
      for (const p of withCue) positions.set(p.findIndex((s) => s.category === 'cat'), (positions.get(p.findIndex((s) => s.category === 'cat')) ?? 0) + 1);
      const counts = Array.from({ length: slots }, (_, i) => positions.get(i) ?? 0);
      expect(Math.max(...counts) - Math.min(...counts)).toBeLessThanOrEqual(1);
    }
  });

  it('planComposites without a cue balances every category and keeps an overlay\'s two categories different', () => {
    const plan = planComposites(createRandom(3), { imagesPerCategory: images, count: 25, slots: 2, cued: null });
    for (const p of plan) expect(p[0]!.category).not.toBe(p[1]!.category);
    const counts = new Map<string, number>();
    for (const p of plan) for (const s of p) counts.set(s.category, (counts.get(s.category) ?? 0) + 1);
    expect(spread(counts, [...images.keys()])).toBeLessThanOrEqual(1);
    expect([...counts.values()].reduce((a, b) => a + b, 0)).toBe(50);
  });

  it('planComposites uses each source image of a category once before any twice', () => {
    const plan = planComposites(createRandom(8), { imagesPerCategory: images, count: 40, slots: 2, cued: null });
    const uses = new Map<string, number[]>();
    for (const p of plan) for (const s of p) (uses.get(s.category) ?? uses.set(s.category, []).get(s.category)!).push(s.image);
    for (const [category, list] of uses) {
      const n = images.get(category)!;
      const perImage = Array.from({ length: n }, (_, i) => list.filter((x) => x === i).length);
      expect(Math.max(...perImage) - Math.min(...perImage), category).toBeLessThanOrEqual(1);
      expect(list.every((x) => x >= 0 && x < n)).toBe(true);
    }
  });

  it('planComposites is a function of the seed', () => {
    const a = planComposites(createRandom(5), { imagesPerCategory: images, count: 10, slots: 4, cued: 'dog' });
    expect(planComposites(createRandom(5), { imagesPerCategory: images, count: 10, slots: 4, cued: 'dog' })).toEqual(a);
    expect(planComposites(createRandom(6), { imagesPerCategory: images, count: 10, slots: 4, cued: 'dog' })).not.toEqual(a);
  });
});
