import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { parseModulationSpec } from '../../src/modulation/spec.js';
import { resolveModulations } from '../../src/modulation/resolve.js';
import { siteShapeOf } from '../../src/modulation/site-shape.js';
import type { ResolveContext, SiteShape } from '../../src/modulation/types.js';

const SITES = new Map<string, SiteShape>([
  ['conv1_relu', siteShapeOf([4, 4, 4])!],
  ['conv2_relu', siteShapeOf([4, 2, 2])!],
  ['fc1', siteShapeOf([3])!],
]);
const SITE_NAMES = ['input', 'conv1', 'conv1_relu', 'conv2', 'conv2_relu', 'shape_of_conv2', 'fc1', 'logits'];
const CATEGORIES = ['ring', 'cross', 'bar'];

// raw per-channel table values for conv1_relu, one row per category (ring, cross, bar):
// channel 0: [3, 0, 0] → z = [2, −1, −1]/√2; channel 1: [1, 0, 2] → z = [0, −1, 1]·√1.5;
// channel 2: [0, 1, 2] → z = [−1, 0, 1]·√1.5; channel 3: [5, 5, 5] → z = 0 (zero variance)
// (population-SD z-scores, computed by hand; ../shared/DOMAIN.md defines the normalisation)
const RAW: Record<string, number[]> = { ring: [3, 1, 0, 5], cross: [0, 0, 1, 5], bar: [0, 2, 2, 5] };
const Z_RING = [Math.SQRT2, 0, -Math.sqrt(1.5), 0];

function table(scale = 1): (site: string, category: string) => Float64Array | undefined {
  return (site, category) => (site === 'conv1_relu' && RAW[category] ? Float64Array.from(RAW[category]!, (v) => v * scale) : undefined);
}

const context = (extra: Partial<ResolveContext> = {}): ResolveContext => ({ sites: SITES, siteNames: SITE_NAMES, categories: CATEGORIES, ...extra });
const resolveText = (text: string, extra: Partial<ResolveContext> = {}) => resolveModulations(parseModulationSpec(text, { source: 'spec.yaml' }), context(extra));

function usageMessage(action: () => unknown): string {
  try {
    action();
  } catch (error) {
    expect(error).toBeInstanceOf(UsageError);
    return (error as UsageError).message;
  }
  throw new Error('expected a UsageError, nothing was thrown');
}

describe('resolveModulations', () => {
  it('resolveModulations(gain, offset, uniform) copies the vectors and leaves the other input neutral', () => {
    const [gain, offset, uniform] = resolveText(`
modulations:
  - { site: conv1_relu, kind: gain, values: [1.5, 0, 2, 0.25] }
  - { site: conv2_relu, kind: offset, values: [-1, 0, 0.5, 3] }
  - { site: fc1, kind: uniform, strength: 1.25 }
`);
    expect(Array.from(gain!.gain)).toEqual([1.5, 0, 2, 0.25]);
    expect(Array.from(gain!.offset)).toEqual([0, 0, 0, 0]);
    expect(Array.from(offset!.gain)).toEqual([1, 1, 1, 1]);
    expect(Array.from(offset!.offset)).toEqual([-1, 0, 0.5, 3]);
    expect(Array.from(uniform!.gain)).toEqual([1.25, 1.25, 1.25]);
    expect(uniform).toMatchObject({ site: 'fc1', features: 3, positions: 1, spatial: false, window: null, outside: 1, noise: null });
  });

  it('resolveModulations(lesion channels) gives exactly 0 gain on the listed channels only', () => {
    const [r] = resolveText('{ site: conv1_relu, kind: lesion, channels: [2, 0] }');
    expect(Array.from(r!.gain)).toEqual([0, 1, 0, 1]);
    expect(Object.is(r!.gain[0], 0)).toBe(true);
    expect(r!.source.details['channels']).toEqual([2, 0]);
  });

  it('resolveModulations(tuning) gives g = max(0, 1 + β·z) from the normalised table row of the target', () => {
    const [r] = resolveText('{ site: conv1_relu, kind: tuning, target: ring, strength: 0.5 }', { tables: { tuning: table() } });
    Z_RING.forEach((z, k) => expect(r!.gain[k]!).toBeCloseTo(Math.fround(1 + 0.5 * z), 6));
    // β = 1: channel 2 has 1 − √1.5 < 0 → clamped to exactly 0
    const [strong] = resolveText('{ site: conv1_relu, kind: tuning, target: ring, strength: 1 }', { tables: { tuning: table() } });
    expect(strong!.gain[2]).toBe(0);
    expect(strong!.source.details['clampedAtZero']).toBe(1);
    const [free] = resolveText('{ site: conv1_relu, kind: tuning, target: ring, strength: 1, allowNegative: true }', { tables: { tuning: table() } });
    expect(free!.gain[2]!).toBeCloseTo(1 - Math.sqrt(1.5), 6);
  });

  it('resolveModulations(sensitivity) normalises across categories, so a rescaled table gives the same gains', () => {
    // exact property of the z-score: z(a·r) = z(r) for a > 0
    const [a] = resolveText('{ site: conv1_relu, kind: sensitivity, target: ring, strength: 0.3 }', { tables: { sensitivity: table(1) } });
    const [b] = resolveText('{ site: conv1_relu, kind: sensitivity, target: ring, strength: 0.3 }', { tables: { sensitivity: table(1e-4) } });
    for (let k = 0; k < 4; k++) {
      expect(a!.gain[k]!).toBeCloseTo(1 + 0.3 * Z_RING[k]!, 6);
      expect(Math.abs(a!.gain[k]! - b!.gain[k]!)).toBeLessThanOrEqual(1e-6);
    }
  });

  it('resolveModulations(lesion top) silences the channels most tuned to the target, ties to the lower index', () => {
    const [one] = resolveText('{ site: conv1_relu, kind: lesion, top: 1, target: ring }', { tables: { tuning: table() } });
    expect(Array.from(one!.gain)).toEqual([0, 1, 1, 1]);
    // z for ring: [√2, 0, −√1.5, 0]: second place is a tie between channels 1 and 3 → channel 1
    const [two] = resolveText('{ site: conv1_relu, kind: lesion, top: 2, target: ring }', { tables: { tuning: table() } });
    expect(Array.from(two!.gain)).toEqual([0, 0, 1, 1]);
    const [bySensitivity] = resolveText('{ site: conv1_relu, kind: lesion, top: 1, target: bar, rankBy: sensitivity }', { tables: { sensitivity: table() } });
    // z for bar: [−1/√2, √1.5, √1.5, 0]: channels 1 and 2 tie → channel 1
    expect(Array.from(bySensitivity!.gain)).toEqual([1, 0, 1, 1]);
  });

  it('resolveModulations(noise) carries mode, sd and seed and keeps gain 1, offset 0', () => {
    const [r] = resolveText('{ site: fc1, kind: noise, sd: 0.2, seed: run-7, mode: additive }');
    expect(r!.noise).toEqual({ mode: 'additive', sd: 0.2, seed: 'run-7' });
    expect(Array.from(r!.gain)).toEqual([1, 1, 1]);
    expect(Array.from(r!.offset)).toEqual([0, 0, 0]);
  });

  it('resolveModulations(window) makes the modulation spatial with [H*W] weights and the outside gain', () => {
    const [r] = resolveText('{ site: conv2_relu, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 0.5, y0: 0, y1: 1, outside: 0.5 } }');
    expect(r!.spatial).toBe(true);
    expect(Array.from(r!.window!)).toEqual([1, 0, 1, 0]); // 2×2 map, left column
    expect(r!.outside).toBe(0.5);
    expect(r!.description).toContain('box window');
  });

  it('resolveModulations(spec) writes a one-line description and a JSON-able source record', () => {
    const resolved = resolveText(`
modulations:
  - { site: conv1_relu, kind: tuning, target: ring, strength: 0.5, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0.2 } }
  - { site: fc1, kind: noise, sd: 0.1, seed: 3 }
`, { tables: { tuning: table() } });
    for (const r of resolved) {
      expect(r.description).not.toContain('\n');
      expect(JSON.parse(JSON.stringify(r.source))).toEqual(r.source);
    }
    expect(resolved[0]!.source.gain).toEqual(Array.from(resolved[0]!.gain));
    expect(resolved[0]!.source.window).toEqual({ shape: 'gaussian', cx: 0.5, cy: 0.5, sigma: 0.2, outside: 1 });
    expect(resolved[1]!.source.noise).toEqual({ mode: 'multiplicative', sd: 0.1, seed: 3 });
  });

  const BAD: Array<[string, string, Partial<ResolveContext>, string[]]> = [
    ['a site that does not exist', 'modulations: [{ site: conv1relu, kind: uniform, strength: 2 }]', {}, ['modulations[0].site "conv1relu" not found', 'closest: "conv1_relu"', '8 recordable tensors']],
    ['a site without a channel axis', '{ site: shape_of_conv2, kind: uniform, strength: 2 }', {}, ['site "shape_of_conv2" cannot be modulated']],
    ['a vector of the wrong length', '{ site: conv1_relu, kind: gain, values: [1, 2, 3] }', {}, ['values has 3 values', 'has 4 channels']],
    ['an offset vector of the wrong length', '{ site: fc1, kind: offset, values: [1, 2, 3, 4, 5] }', {}, ['values has 5 values', 'has 3 channels']],
    ['a value that overflows float32', '{ site: fc1, kind: gain, values: [1, 1e39, 1] }', {}, ['values[1] is 1e+39, which overflows float32']],
    ['a lesion channel out of range', '{ site: fc1, kind: lesion, channels: [0, 3] }', {}, ['channels[1] is 3', 'has 3 channels (0–2)']],
    ['top larger than the channel count', '{ site: conv1_relu, kind: lesion, top: 5, target: ring }', { tables: { tuning: table() } }, ['top is 5', 'has only 4 channels']],
    ['an unknown category', '{ site: conv1_relu, kind: tuning, target: rnig, strength: 1 }', { tables: { tuning: table() } }, ['target "rnig" is not a known category', 'known: "ring", "cross", "bar"', 'closest: "ring"']],
    ['a missing tuning table', '{ site: conv1_relu, kind: tuning, target: ring, strength: 1 }', {}, ['target needs a tuning table', 'sonde tune']],
    ['a missing tuning table for top', '{ site: conv1_relu, kind: lesion, top: 1, target: ring }', {}, ['needs a tuning table', 'sonde tune']],
    ['a missing sensitivity table', '{ site: conv1_relu, kind: sensitivity, target: ring, strength: 1 }', { tables: { tuning: table() } }, ['needs a sensitivity table', 'sonde sense']],
    ['a missing category list', '{ site: conv1_relu, kind: tuning, target: ring, strength: 1 }', { tables: { tuning: table() }, categories: [] }, ['needs the category list']],
    ['a table without the site', '{ site: conv2_relu, kind: tuning, target: ring, strength: 1 }', { tables: { tuning: table() } }, ['needs tuning values for site "conv2_relu", category "ring"', 'sonde tune']],
    ['a table of the wrong length', '{ site: conv1_relu, kind: tuning, target: ring, strength: 1 }', { tables: { tuning: () => Float64Array.from([1, 2]) } }, ['needs 4 tuning values', 'the table has 2']],
    ['a table with NaN', '{ site: conv1_relu, kind: tuning, target: ring, strength: 1 }', { tables: { tuning: () => Float64Array.from([1, Number.NaN, 0, 0]) } }, ['channel 1 is NaN']],
    ['a window on a [N, C] vector site', '{ site: fc1, kind: uniform, strength: 2, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0.2 } }', {}, ['window is set, but site "fc1" has no spatial extent']],
    ['a box that covers no pixel centre', '{ site: conv1_relu, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 0.1, y0: 0, y1: 1 } }', {}, ['window covers no position of the 4×4 map']],
  ];
  it.each(BAD)('resolveModulations(spec) rejects %s with a one-line UsageError', (_what, text, extra, parts) => {
    const message = usageMessage(() => resolveText(text, extra));
    expect(message.startsWith('spec.yaml: ')).toBe(true);
    for (const part of parts) expect(message).toContain(part);
    expect(message).not.toContain('\n');
  });
});
