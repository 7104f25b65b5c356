import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { DEMO_KINDS, createDisplaySet, renderDisplay, resolveDisplayOptions } from '../../src/stimuli/demo/index.js';

describe('renderDisplay', () => {
  it('renderDisplay(options, i) is deterministic: the same options give identical pixels and labels', () => {
    const a = renderDisplay({ seed: 11, count: 5 }, 3);
    const b = renderDisplay({ seed: 11, count: 5 }, 3);
    expect(Buffer.from(a.pixels.buffer).equals(Buffer.from(b.pixels.buffer))).toBe(true);
    expect(a.labels).toEqual(b.labels);
  });

  it('renderDisplay(options, i) regenerates display i of a set alone, whatever the count', () => {
    const set = createDisplaySet({ seed: 4, count: 20 });
    const alone = renderDisplay({ seed: 4, count: 1000 }, 17);
    expect(Buffer.from(set.render(17).pixels.buffer).equals(Buffer.from(alone.pixels.buffer))).toBe(true);
  });

  it('renderDisplay(options, i) of a cued set regenerates display i of the same set alone', () => {
    const options = { seed: 4, count: 40, cued: 'star' as const };
    const set = createDisplaySet(options);
    const alone = renderDisplay(options, 29);
    expect(Buffer.from(set.render(29).pixels.buffer).equals(Buffer.from(alone.pixels.buffer))).toBe(true);
  });

  it('renderDisplay(options, i) gives CHW [3, 64, 64] values k/255 in [0, 1]', () => {
    const { pixels } = renderDisplay({ seed: 2, noise: 0.3 }, 0);
    expect(pixels).toBeInstanceOf(Float32Array);
    expect(pixels.length).toBe(3 * 64 * 64);
    for (let i = 0; i < pixels.length; i++) {
      const v = pixels[i]!;
      expect(v >= 0 && v <= 1).toBe(true);
      const k = Math.round(v * 255);
      expect(Math.abs(v - Math.fround(k / 255))).toBe(0);
    }
  });

  it('renderDisplay(options, i) holds 1 to maxGlyphs distinct kinds, all from options.kinds, in DEMO_KINDS order', () => {
    const set = createDisplaySet({ seed: 9, count: 300, kinds: ['star', 'disc', 'bar'], maxGlyphs: 2, clutter: 0, noise: 0 });
    const sizes = new Set<number>();
    for (let i = 0; i < 300; i++) {
      const { labels } = set.render(i);
      sizes.add(labels.length);
      expect(labels.length).toBeGreaterThanOrEqual(1);
      expect(labels.length).toBeLessThanOrEqual(2);
      for (const kind of labels) expect(['star', 'disc', 'bar']).toContain(kind);
      const order = labels.map((kind) => DEMO_KINDS.indexOf(kind));
      expect([...order].sort((x, y) => x - y)).toEqual(order);
      expect(new Set(labels).size).toBe(labels.length);
    }
    expect([...sizes].sort()).toEqual([1, 2]);
  });

  it('renderDisplay(options, i) draws each kind with prevalence mean(glyphs)/8 = 0.25 (binomial, ±4 SD)', () => {
    // 1–3 glyphs uniformly → 2 of 8 kinds on average; over n = 1200 displays the SD of a prevalence is
    // sqrt(0.25·0.75/1200) = 0.0125 (binomial; the draws of one display are not independent across kinds,
    // but each kind's indicator is Bernoulli(0.25) across displays)
    const set = createDisplaySet({ seed: 123, count: 1200, noise: 0, clutter: 0 });
    const counts = new Map<string, number>(DEMO_KINDS.map((kind) => [kind, 0]));
    for (let i = 0; i < 1200; i++) for (const kind of set.render(i).labels) counts.set(kind, counts.get(kind)! + 1);
    for (const kind of DEMO_KINDS) expect(Math.abs(counts.get(kind)! / 1200 - 0.25)).toBeLessThan(4 * 0.0125);
  });

  it('renderDisplay(options, i) changes only by the added noise when only the noise level changes', () => {
    // the noise stream is forked separately, so the same seed with and without noise differs only by noise:
    // the mean absolute difference is about E|N(0, σ)| = σ·sqrt(2/π) (half-normal mean; clamping lowers it)
    const clean = renderDisplay({ seed: 5, clutter: 0.5, noise: 0 }, 0).pixels;
    const noisy = renderDisplay({ seed: 5, clutter: 0.5, noise: 0.05 }, 0).pixels;
    let sum = 0;
    for (let i = 0; i < clean.length; i++) sum += Math.abs(noisy[i]! - clean[i]!);
    const expected = 0.05 * Math.sqrt(2 / Math.PI);
    expect(Math.abs(sum / clean.length - expected)).toBeLessThan(0.15 * expected);
  });

  it('renderDisplay(options, i) rejects an index outside the set', () => {
    expect(() => renderDisplay({ count: 3 }, 3)).toThrow(UsageError);
    expect(() => renderDisplay({ count: 3 }, -1)).toThrow(/outside the set/);
  });
});

function hintOf(action: () => unknown): string {
  try {
    action();
  } catch (error) {
    if (error instanceof UsageError) return error.hint ?? '';
    throw error;
  }
  throw new Error('expected a UsageError');
}

describe('resolveDisplayOptions', () => {
  it('resolveDisplayOptions({}) gives the documented defaults', () => {
    const d = resolveDisplayOptions({});
    expect(d).toEqual({
      seed: 0,
      count: 1,
      kinds: [...DEMO_KINDS],
      clutter: 0.6,
      noise: 0.18,
      contrast: 0.26,
      glyphRadius: [4.5, 8.5],
      maxGlyphs: 3,
      cued: null,
    });
  });

  it('resolveDisplayOptions(options) names the option and value of a bad input', () => {
    expect(() => resolveDisplayOptions({ clutter: 1.5 })).toThrow(/clutter = 1.5/);
    expect(() => resolveDisplayOptions({ noise: -0.1 })).toThrow(/noise = -0.1/);
    expect(() => resolveDisplayOptions({ seed: 1.5 })).toThrow(/seed = 1.5/);
    expect(() => resolveDisplayOptions({ kinds: [] })).toThrow(UsageError);
    expect(hintOf(() => resolveDisplayOptions({ kinds: ['disc', 'disc'] }))).toMatch(/name each kind once/);
    expect(hintOf(() => resolveDisplayOptions({ cued: 'ring', kinds: ['disc'] }))).toMatch(/cued kind must be one of/);
    expect(hintOf(() => resolveDisplayOptions({ cued: 'ring', count: 9 }))).toMatch(/even count.*use 10/);
    expect(() => resolveDisplayOptions({ glyphRadius: [8, 6] })).toThrow(/glyphRadius\[1\]/);
  });
});
