import { describe, expect, it } from 'vitest';
import { RuntimeFailure } from '../../src/errors.js';
import { fillModulationInputs, identityInputs, inputLength, inputShape, modulationInputs } from '../../src/modulation/inputs.js';
import { resolveModulations } from '../../src/modulation/resolve.js';
import { parseModulationSpec } from '../../src/modulation/spec.js';
import { siteShapeOf } from '../../src/modulation/site-shape.js';
import type { ResolvedModulation, SiteShape } from '../../src/modulation/types.js';

const SITES = new Map<string, SiteShape>([
  ['map', siteShapeOf([3, 4, 4])!],
  ['wide', siteShapeOf([64])!],
  ['other', siteShapeOf([64])!],
  ['small', siteShapeOf([2, 2, 4])!],
]);

function resolveOne(text: string): ResolvedModulation {
  const spec = parseModulationSpec(text, { source: 'spec.yaml' });
  return resolveModulations(spec, { sites: SITES, siteNames: [...SITES.keys()] })[0]!;
}

const sameBits = (a: Float32Array, b: Float32Array): boolean =>
  a.length === b.length && Buffer.from(a.buffer, a.byteOffset, a.byteLength).equals(Buffer.from(b.buffer, b.byteOffset, b.byteLength));

describe('inputShape', () => {
  it('inputShape(resolved, rows) is [rows, C, 1, 1] without a window and [rows, C, H, W] with one', () => {
    expect(inputShape(resolveOne('{ site: map, kind: uniform, strength: 2 }'), 5)).toEqual([5, 3, 1, 1]);
    expect(inputShape(resolveOne('{ site: map, kind: uniform, strength: 2, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0.3 } }'), 5)).toEqual([5, 3, 4, 4]);
    expect(inputLength(resolveOne('{ site: small, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 1, y0: 0, y1: 1 } }'), 3)).toBe(3 * 2 * 2 * 4);
  });
});

describe('identityInputs', () => {
  it('identityInputs(resolved, rows) is G = 1, B = 0 in the modulation layout', () => {
    const { gain, offset, shape } = identityInputs(resolveOne('{ site: small, kind: noise, sd: 1, window: { shape: box, x0: 0, x1: 0.5, y0: 0, y1: 1 } }'), 2);
    expect(shape).toEqual([2, 2, 2, 4]);
    expect(gain.every((g) => g === 1)).toBe(true);
    expect(offset.every((b) => Object.is(b, 0))).toBe(true);
  });
});

describe('fillModulationInputs', () => {
  it('fillModulationInputs(gain 1 / offset 0) writes exactly the identity inputs', () => {
    // exact property: a gain vector of ones, an offset of zeros, uniform 1 or noise with sd 0 is the identity
    const cases = [
      '{ site: map, kind: gain, values: [1, 1, 1] }',
      '{ site: map, kind: offset, values: [0, 0, 0] }',
      '{ site: map, kind: uniform, strength: 1, window: { shape: gaussian, cx: 0.3, cy: 0.6, sigma: 0.2 } }',
      '{ site: map, kind: offset, values: [0, 0, 0], window: { shape: box, x0: 0.25, x1: 0.75, y0: 0, y1: 0.5 } }',
      '{ site: map, kind: noise, sd: 0, seed: 4 }',
      '{ site: map, kind: noise, sd: 0, mode: additive, window: { shape: box, x0: 0, x1: 1, y0: 0, y1: 1 } }',
    ];
    for (const text of cases) {
      const r = resolveOne(text);
      const filled = modulationInputs(r, { firstStimulus: 3, rows: 4 });
      const identity = identityInputs(r, 4);
      expect(sameBits(filled.gain, identity.gain), text).toBe(true);
      expect(sameBits(filled.offset, identity.offset), text).toBe(true);
    }
  });

  it('fillModulationInputs(lesion) writes gain exactly 0 on lesioned channels in every row (NCHW)', () => {
    const r = resolveOne('{ site: map, kind: lesion, channels: [1] }');
    const { gain, offset } = modulationInputs(r, { firstStimulus: 0, rows: 3 });
    // [rows, C, 1, 1]: i = n*C + c
    for (let n = 0; n < 3; n++) expect([gain[n * 3]!, gain[n * 3 + 1]!, gain[n * 3 + 2]!]).toEqual([1, 0, 1]);
    expect(offset.every((b) => b === 0)).toBe(true);
    // windowed: G = outside + w·(0 − outside) → exactly 0 inside the box, outside (1) elsewhere
    const boxed = resolveOne('{ site: small, kind: lesion, channels: [0], window: { shape: box, x0: 0.5, x1: 1, y0: 0, y1: 0.5 } }');
    const spatial = modulationInputs(boxed, { firstStimulus: 0, rows: 2 });
    const [, C, H, W] = spatial.shape;
    for (let n = 0; n < 2; n++) {
      for (let c = 0; c < C; c++) {
        for (let h = 0; h < H; h++) {
          for (let w = 0; w < W; w++) {
            const i = ((n * C + c) * H + h) * W + w; // NCHW
            const inside = h === 0 && w >= 2; // y centre 0.25 < 0.5, x centres 0.625, 0.875 ≥ 0.5
            expect(spatial.gain[i]).toBe(c === 0 && inside ? 0 : 1);
          }
        }
      }
    }
  });

  it('fillModulationInputs(gaussian window) gives G = outside + w·(g − outside) with w = exp(−d²/2σ²)', () => {
    // closed form at hand-computed centres of a 4×4 map; cx = cy = 0.5, σ = 0.25 (2σ² = 0.125); g = 3, outside = 1
    const r = resolveOne('{ site: map, kind: uniform, strength: 3, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0.25 } }');
    const { gain } = modulationInputs(r, { firstStimulus: 0, rows: 1 });
    const at = (c: number, h: number, w: number): number => gain[(c * 4 + h) * 4 + w]!;
    const expected: Array<[number, number, number]> = [
      [0, 0, Math.exp(-2.25)], // d² = 2·0.375²
      [0, 1, Math.exp(-1.25)], // d² = 0.125² + 0.375²
      [1, 1, Math.exp(-0.25)], // d² = 2·0.125²
      [2, 1, Math.exp(-0.25)], // centre (0.375, 0.625): d² = 2·0.125²
      [3, 2, Math.exp(-1.25)], // centre (0.625, 0.875): d² = 0.125² + 0.375²
    ];
    for (const [h, w, weight] of expected) {
      for (let c = 0; c < 3; c++) expect(Math.abs(at(c, h, w) - (1 + weight * 2))).toBeLessThanOrEqual(2e-7 * (1 + weight * 2));
    }
    // offsets are weighted too: B = w·b
    const o = resolveOne('{ site: map, kind: offset, values: [2, -4, 0], window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0.25, outside: 1 } }');
    const b = modulationInputs(o, { firstStimulus: 0, rows: 1 }).offset;
    expect(Math.abs(b[(1 * 4 + 0) * 4 + 0]! - -4 * Math.exp(-2.25))).toBeLessThanOrEqual(1e-6);
    expect(b[(2 * 4 + 1) * 4 + 1]).toBe(0);
  });

  it('fillModulationInputs(noise) reproduces with the same seed and does not depend on how stimuli are batched', () => {
    for (const text of [
      '{ site: wide, kind: noise, sd: 0.3, seed: 9 }',
      '{ site: wide, kind: noise, sd: 0.3, seed: 9, mode: additive }',
      '{ site: small, kind: noise, sd: 0.3, seed: abc, window: { shape: gaussian, cx: 0.2, cy: 0.8, sigma: 0.4 } }',
      '{ site: small, kind: noise, sd: 0.3, seed: 5, mode: additive, window: { shape: box, x0: 0, x1: 0.5, y0: 0, y1: 1 } }',
    ]) {
      const r = resolveOne(text);
      const whole = modulationInputs(r, { firstStimulus: 10, rows: 7 });
      const again = modulationInputs(resolveOne(text), { firstStimulus: 10, rows: 7 });
      expect(sameBits(whole.gain, again.gain) && sameBits(whole.offset, again.offset), text).toBe(true);
      // stimuli 10…16 split as [10, 11, 12] + [13…16], and one at a time
      const perRow = inputLength(r, 1);
      const a = modulationInputs(r, { firstStimulus: 10, rows: 3 });
      const b = modulationInputs(r, { firstStimulus: 13, rows: 4 });
      const joinedGain = new Float32Array(whole.gain.length);
      joinedGain.set(a.gain, 0);
      joinedGain.set(b.gain, 3 * perRow);
      const joinedOffset = new Float32Array(whole.offset.length);
      joinedOffset.set(a.offset, 0);
      joinedOffset.set(b.offset, 3 * perRow);
      expect(sameBits(joinedGain, whole.gain) && sameBits(joinedOffset, whole.offset), text).toBe(true);
      for (let n = 0; n < 7; n++) {
        const single = modulationInputs(r, { firstStimulus: 10 + n, rows: 1 });
        expect(sameBits(single.gain, whole.gain.subarray(n * perRow, (n + 1) * perRow)), text).toBe(true);
        expect(sameBits(single.offset, whole.offset.subarray(n * perRow, (n + 1) * perRow)), text).toBe(true);
      }
    }
  });

  it('fillModulationInputs(noise) gives different stimuli, seeds and sites different draws', () => {
    const r = resolveOne('{ site: wide, kind: noise, sd: 0.3, seed: 9 }');
    const { gain } = modulationInputs(r, { firstStimulus: 0, rows: 2 });
    expect(sameBits(gain.subarray(0, 64), gain.subarray(64, 128))).toBe(false);
    const otherSeed = modulationInputs(resolveOne('{ site: wide, kind: noise, sd: 0.3, seed: 10 }'), { firstStimulus: 0, rows: 2 });
    expect(sameBits(gain, otherSeed.gain)).toBe(false);
    const otherSite = modulationInputs(resolveOne('{ site: other, kind: noise, sd: 0.3, seed: 9 }'), { firstStimulus: 0, rows: 2 });
    expect(sameBits(gain, otherSite.gain)).toBe(false);
    // every channel gets its own draw: no two channels of a stimulus are equal (64 continuous draws)
    expect(new Set(gain.subarray(0, 64)).size).toBe(64);
  });

  it('fillModulationInputs(noise) has the requested mean and standard deviation', () => {
    // G = 1 + sd·z with z standard normal: mean 1, SD sd; B = sd·z: mean 0, SD sd. 4000×64 draws; the
    // tolerances are about 5 standard errors (SE of the mean sd/√256000 ≈ 2e-4 for sd = 0.1)
    const rows = 4000;
    for (const mode of ['multiplicative', 'additive'] as const) {
      const r = resolveOne(`{ site: wide, kind: noise, sd: 0.1, seed: 21, mode: ${mode} }`);
      const { gain, offset } = modulationInputs(r, { firstStimulus: 0, rows });
      const values = mode === 'multiplicative' ? gain : offset;
      let sum = 0;
      for (const v of values) sum += v;
      const mean = sum / values.length;
      let squares = 0;
      for (const v of values) squares += (v - mean) ** 2;
      const sd = Math.sqrt(squares / (values.length - 1));
      expect(Math.abs(mean - (mode === 'multiplicative' ? 1 : 0))).toBeLessThan(1e-3);
      expect(Math.abs(sd - 0.1)).toBeLessThan(1e-3);
      const other = mode === 'multiplicative' ? offset : gain;
      expect(other.every((v) => v === (mode === 'multiplicative' ? 0 : 1))).toBe(true);
    }
  });

  it('fillModulationInputs(multiplicative noise) clamps gains at 0 unless allowNegative', () => {
    // with sd = 2, P(1 + 2z < 0) = P(z < −0.5) ≈ 0.31: both cases occur among 640 draws
    const clamped = modulationInputs(resolveOne('{ site: wide, kind: noise, sd: 2, seed: 1 }'), { firstStimulus: 0, rows: 10 }).gain;
    expect(clamped.every((g) => g >= 0)).toBe(true);
    expect(clamped.some((g) => g === 0)).toBe(true);
    const free = modulationInputs(resolveOne('{ site: wide, kind: noise, sd: 2, seed: 1, allowNegative: true }'), { firstStimulus: 0, rows: 10 }).gain;
    expect(free.some((g) => g < 0)).toBe(true);
    // where the free draw is non-negative, the clamped one is identical
    for (let i = 0; i < free.length; i++) expect(clamped[i]).toBe(Math.max(0, free[i]!));
  });

  it('fillModulationInputs(resolved, batch, wrong buffers) throws a RuntimeFailure', () => {
    const r = resolveOne('{ site: map, kind: uniform, strength: 2 }');
    expect(() => fillModulationInputs(r, { firstStimulus: 0, rows: 2 }, new Float32Array(5), new Float32Array(6))).toThrow(RuntimeFailure);
    expect(() => fillModulationInputs(r, { firstStimulus: -1, rows: 2 }, new Float32Array(6), new Float32Array(6))).toThrow(/firstStimulus must be an integer ≥ 0/);
    // rows = 0 is allowed and writes nothing
    expect(() => fillModulationInputs(r, { firstStimulus: 0, rows: 0 }, new Float32Array(0), new Float32Array(0))).not.toThrow();
  });
});

describe('fillModulationInputs at token tensors', () => {
  const TOKEN_SITES = new Map<string, SiteShape>([
    ['tok', siteShapeOf([5, 3])!], // 1 class token + 2×2 patches, 3 features
    ['att', siteShapeOf([10, 4], { kind: 'tokens', featureAxis: 1, source: 'graph' }, { shared: true, heads: 2 })!],
  ]);
  const resolveToken = (text: string): ResolvedModulation =>
    resolveModulations(parseModulationSpec(text, { source: 'spec.yaml' }), { sites: TOKEN_SITES, siteNames: [...TOKEN_SITES.keys()] })[0]!;

  it('inputShape(tokens) is [rows, 1, D] for one gain per feature and [rows, T, D] with a token selection; a shared site is one [1, D] row', () => {
    expect(inputShape(resolveToken('{ site: tok, kind: gain, values: [1, 2, 3] }'), 4)).toEqual([4, 1, 3]);
    expect(inputShape(resolveToken('{ site: tok, kind: uniform, gain: 2, tokens: [class] }'), 4)).toEqual([4, 5, 3]);
    expect(inputShape(resolveToken('{ site: att, kind: gain, per: head, values: [1, 0] }'), 7)).toEqual([1, 4]);
  });

  it('fillModulationInputs(token selection) writes G = outside + w_t·(g_f − outside) at [n, t, f] (closed form)', () => {
    const r = resolveToken('{ site: tok, kind: gain, values: [2, 3, 4], tokens: { at: [class, [1, 1]], outside: 0.5 } }');
    const { gain, offset } = modulationInputs(r, { firstStimulus: 0, rows: 2 });
    const chosen = new Set([0, 1 + 1 * 2 + 1]);
    const g = [2, 3, 4];
    for (let n = 0; n < 2; n++) {
      for (let t = 0; t < 5; t++) {
        for (let f = 0; f < 3; f++) {
          const i = (n * 5 + t) * 3 + f; // [N, T, D]
          expect(gain[i]).toBe(chosen.has(t) ? g[f] : 0.5);
          expect(offset[i]).toBe(0);
        }
      }
    }
  });

  it('fillModulationInputs(shared per-head gain) fills one row whatever the batch, each head value over its features', () => {
    const r = resolveToken('{ site: att, kind: gain, per: head, values: [1.5, 0] }');
    const { gain, shape } = modulationInputs(r, { firstStimulus: 10, rows: 3 });
    expect(shape).toEqual([1, 4]);
    expect(Array.from(gain)).toEqual([1.5, 1.5, 0, 0]);
  });

  it('fillModulationInputs(noise on tokens with a selection) draws per stimulus, whatever the batch split', () => {
    const r = resolveToken('{ site: tok, kind: noise, sd: 0.3, seed: 5, tokens: [patches] }');
    const whole = modulationInputs(r, { firstStimulus: 0, rows: 3 }).gain;
    const last = modulationInputs(r, { firstStimulus: 2, rows: 1 }).gain;
    expect(sameBits(whole.subarray(2 * 15, 3 * 15), last)).toBe(true);
    // the class token lies outside the selection: gain exactly 1 there
    for (let n = 0; n < 3; n++) for (let f = 0; f < 3; f++) expect(whole[n * 15 + f]).toBe(1);
  });
});

describe('fillModulationInputs on channels-last maps', () => {
  it('fillModulationInputs(window on [H, W, C] features last) writes G = outside + w(h, w)·(g_c − outside) at [n, h, w, c]', () => {
    const sites = new Map<string, SiteShape>([['nhwc', siteShapeOf([2, 3, 2], { kind: 'channels-last', featureAxis: 2, source: 'sidecar' })!]]);
    const r = resolveModulations(parseModulationSpec('{ site: nhwc, kind: gain, values: [2, 4], window: { shape: box, x0: 0, x1: 0.34, y0: 0, y1: 1, outside: 0.5 } }', { source: 'spec.yaml' }), { sites, siteNames: ['nhwc'] })[0]!;
    expect(inputShape(r, 1)).toEqual([1, 2, 3, 2]);
    const { gain } = modulationInputs(r, { firstStimulus: 0, rows: 1 });
    for (let h = 0; h < 2; h++) {
      for (let w = 0; w < 3; w++) {
        for (let c = 0; c < 2; c++) expect(gain[(h * 3 + w) * 2 + c]).toBe(w === 0 ? [2, 4][c] : 0.5); // only column 0 has its centre (1/6) in [0, 0.34)
      }
    }
    expect(inputShape(resolveModulations(parseModulationSpec('{ site: nhwc, kind: gain, values: [2, 4] }', { source: 'spec.yaml' }), { sites, siteNames: ['nhwc'] })[0]!, 5)).toEqual([5, 1, 1, 2]);
  });
});
