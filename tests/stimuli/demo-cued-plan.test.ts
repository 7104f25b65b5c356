import { describe, expect, it } from 'vitest';
import { createRandom } from '../../src/random.js';
import { DEMO_KINDS, createDisplaySet, planCuedSet } from '../../src/stimuli/demo/index.js';

describe('planCuedSet', () => {
  it('planCuedSet(random, 200, kinds, cue, 3) puts the cue in exactly half the displays', () => {
    for (const cue of DEMO_KINDS) {
      const plans = planCuedSet(createRandom(7), 200, DEMO_KINDS, cue, 3);
      expect(plans).toHaveLength(200);
      expect(plans.filter((p) => p.kinds.includes(cue))).toHaveLength(100);
      // the cue-absent half is exactly the displays with a substitute decoy
      for (const plan of plans) expect(plan.substitute).toBe(!plan.kinds.includes(cue));
    }
  });

  it('planCuedSet(...) balances every other kind exactly across the two halves (tolerance 0)', () => {
    const plans = planCuedSet(createRandom(8), 400, DEMO_KINDS, 'ring', 3);
    for (const kind of DEMO_KINDS.filter((k) => k !== 'ring')) {
      const withCue = plans.filter((p) => p.kinds.includes('ring') && p.kinds.includes(kind)).length;
      const withoutCue = plans.filter((p) => !p.kinds.includes('ring') && p.kinds.includes(kind)).length;
      expect(withCue).toBe(withoutCue);
      expect(withCue).toBeGreaterThan(0);
    }
  });

  it('planCuedSet(...) gives both halves the same number of objects (glyphs + decoy)', () => {
    const plans = planCuedSet(createRandom(9), 300 * 2, DEMO_KINDS, 'bar', 3);
    const objects = (present: boolean): number[] =>
      plans.filter((p) => p.kinds.includes('bar') === present).map((p) => p.kinds.length + (p.substitute ? 1 : 0)).sort();
    expect(objects(true)).toEqual(objects(false));
  });

  it('planCuedSet(...) shuffles: the cue-present displays are not all in the first half', () => {
    const plans = planCuedSet(createRandom(10), 200, DEMO_KINDS, 'star', 3);
    const firstHalf = plans.slice(0, 100).filter((p) => p.kinds.includes('star')).length;
    // under a uniform shuffle the count is hypergeometric(200, 100, 100): mean 50, SD ≈ 3.5; 100 or 0 would be a
    // broken shuffle (probability ~1e-58)
    expect(firstHalf).toBeGreaterThan(30);
    expect(firstHalf).toBeLessThan(70);
  });

  it('planCuedSet(...) with only the cued kind gives cue-only and decoy-only displays', () => {
    const plans = planCuedSet(createRandom(11), 10, ['cross'], 'cross', 3);
    for (const plan of plans) expect(plan.kinds).toEqual(plan.substitute ? [] : ['cross']);
    expect(plans.filter((plan) => plan.substitute)).toHaveLength(5);
  });
});

describe('createDisplaySet (cued)', () => {
  it('createDisplaySet({cued}).render(i) labels follow the plan: exactly half the labels contain the cue', () => {
    const set = createDisplaySet({ seed: 3, count: 60, cued: 'triangle', clutter: 0, noise: 0 });
    let present = 0;
    for (let i = 0; i < 60; i++) if (set.render(i).labels.includes('triangle')) present++;
    expect(present).toBe(30);
  });

  it('createDisplaySet({seed, cued}) differs between cued kinds with the same seed', () => {
    const a = createDisplaySet({ seed: 3, count: 2, cued: 'disc' }).render(0).pixels;
    const b = createDisplaySet({ seed: 3, count: 2, cued: 'ring' }).render(0).pixels;
    expect(Buffer.from(a.buffer).equals(Buffer.from(b.buffer))).toBe(false);
  });
});
