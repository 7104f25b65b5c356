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

// Token sites: [17, 16] is a ViT-like residual stream (class token + 4×4 patches, 16 features), [34, 16]
// the attention output with batch and tokens merged (a shared site of 2 heads), [3, 16] a token tensor
// without a patch grid (3 tokens is no prefix plus a square ≥ 4).
const TOKEN_SITES = new Map<string, SiteShape>([
  ['tok', siteShapeOf([17, 16])!],
  ['att', siteShapeOf([34, 16], { kind: 'tokens', featureAxis: 1, source: 'graph' }, { shared: true, heads: 2 })!],
  ['seq', siteShapeOf([3, 16])!],
  ['map', siteShapeOf([4, 4, 4])!],
]);
const tokenContext = (extra: Partial<ResolveContext> = {}): ResolveContext => ({ sites: TOKEN_SITES, siteNames: [...TOKEN_SITES.keys()], categories: CATEGORIES, ...extra });
const resolveTokens = (text: string, extra: Partial<ResolveContext> = {}) => resolveModulations(parseModulationSpec(text, { source: 'spec.yaml' }), tokenContext(extra));
const ramp = (n: number, f: (i: number) => number): number[] => Array.from({ length: n }, (_, i) => f(i));

describe('resolveModulations at token tensors', () => {
  it('resolveModulations(gain on tokens) gives one gain per feature (D = 16, not T = 17), the same at every token', () => {
    const values = ramp(16, (i) => 0.5 + i / 16);
    const [r] = resolveTokens(JSON.stringify({ site: 'tok', kind: 'gain', values }));
    expect(r!.features).toBe(16);
    expect(r!.positions).toBe(17);
    expect(r!.spatial).toBe(false);
    expect(Array.from(r!.gain)).toEqual(values.map(Math.fround));
    expect(r!.source.shape).toEqual({ features: 16, positions: 17, dims: [17, 16], layout: 'tokens', shared: false });
  });

  it('resolveModulations(per: head) expands each head value to its d = D / H features (head h: features h·d … h·d + d − 1)', () => {
    const [r] = resolveTokens('{ site: tok, kind: gain, per: head, headCount: 4, values: [2, 0.5, 1, 0] }');
    expect(Array.from(r!.gain)).toEqual([2, 2, 2, 2, 0.5, 0.5, 0.5, 0.5, 1, 1, 1, 1, 0, 0, 0, 0]);
    expect(r!.unit).toBe('head');
    expect(r!.heads).toBe(4);
    expect(r!.source.details).toMatchObject({ per: 'head', headCount: 4 });
  });

  it('resolveModulations(lesion heads) zeroes exactly the listed heads, with the head count the model gives', () => {
    const [r] = resolveTokens('{ site: att, kind: lesion, heads: [1] }');
    expect(Array.from(r!.gain)).toEqual([...new Array(8).fill(1), ...new Array(8).fill(0)]);
    expect(r!.source.details['heads']).toEqual([1]);
    expect(r!.description).toContain('lesion of 1/2 heads');
  });

  it('resolveModulations(lesion top heads) ranks heads by the mean normalised table value of their features', () => {
    // per-feature table: features 0–7 (head 0) prefer ring, 8–15 (head 1) prefer bar
    const values: Record<string, number[]> = { ring: ramp(16, (i) => (i < 8 ? 3 : 0)), cross: ramp(16, () => 1), bar: ramp(16, (i) => (i < 8 ? 0 : 3)) };
    const tuning = (site: string, category: string) => (site === 'att' ? Float64Array.from(values[category]!) : undefined);
    const [r] = resolveTokens('{ site: att, kind: lesion, per: head, top: 1, target: bar }', { tables: { tuning } });
    expect(r!.source.details['heads']).toEqual([1]);
    // a table with one value per head is used as it is
    const perHead = (site: string, category: string) => (site === 'att' ? Float64Array.from(category === 'ring' ? [5, 0] : [0, 5]) : undefined);
    const [h] = resolveTokens('{ site: att, kind: lesion, per: head, top: 1, target: ring }', { tables: { tuning: perHead } });
    expect(h!.source.details['heads']).toEqual([0]);
  });

  it('resolveModulations(tokens) weighs the class token, a patch [row, column] and index lists on token positions', () => {
    const [r] = resolveTokens('{ site: tok, kind: uniform, gain: 2, tokens: { at: [class, [1, 2], 16], outside: 0.5 } }');
    const expected = new Array(17).fill(0);
    expected[0] = 1; // class
    expected[1 + 1 * 4 + 2] = 1; // patch row 1, column 2 of the 4×4 grid
    expected[16] = 1;
    expect(Array.from(r!.window!)).toEqual(expected);
    expect(r!.spatial).toBe(true);
    expect(r!.outside).toBe(0.5);
    const [all] = resolveTokens('{ site: tok, kind: uniform, gain: 2, tokens: [patches] }');
    expect(Array.from(all!.window!)).toEqual([0, ...new Array(16).fill(1)]);
  });

  it('resolveModulations(window on tokens) falls on the patch grid; the class token is outside it', () => {
    const [r] = resolveTokens('{ site: tok, kind: uniform, gain: 2, window: { shape: box, x0: 0, x1: 0.5, y0: 0, y1: 0.5 } }');
    const expected = new Array(17).fill(0);
    for (const [row, column] of [[0, 0], [0, 1], [1, 0], [1, 1]]) expected[1 + row! * 4 + column!] = 1;
    expect(Array.from(r!.window!)).toEqual(expected);
  });

  const BAD_TOKENS: Array<[string, string, string[]]> = [
    ['a head count that does not divide D', '{ site: tok, kind: gain, per: head, headCount: 3, values: [1, 1, 1] }', ['headCount is 3, which does not divide the 16 features']],
    ['per head without a known head count', '{ site: tok, kind: gain, per: head, values: [1, 1] }', ['number of heads of "tok" is not known', 'headCount: H']],
    ['a head count other than the model\'s', '{ site: att, kind: gain, per: head, headCount: 4, values: [1, 1, 1, 1] }', ['splits "att" into 2 heads']],
    ['a head value list of the wrong length', '{ site: att, kind: gain, per: head, values: [1, 1, 1] }', ['values has 3 values', 'has 2 heads; give one value per head']],
    ['a lesioned head out of range', '{ site: att, kind: lesion, heads: [2] }', ['heads[0] is 2', 'has 2 heads (0–1)']],
    ['a token index out of range', '{ site: tok, kind: uniform, gain: 2, tokens: [17] }', ['tokens[0] is token 17', 'has 17 tokens (0–16)']],
    ['a patch outside the grid', '{ site: tok, kind: uniform, gain: 2, tokens: [[4, 0]] }', ['tokens[0] is patch [4, 0]', 'patch grid of "tok" is 4×4']],
    ['the class token of a tensor without prefix tokens', '{ site: seq, kind: uniform, gain: 2, tokens: [class] }', ['tokens[0] is class', 'has no class token']],
    ['a window on a token tensor without a grid', '{ site: seq, kind: uniform, gain: 2, window: { shape: box, x0: 0, x1: 0.5, y0: 0, y1: 1 } }', ['window is set', 'token tensor without a patch grid', 'tokens: [..]']],
    ['a patch on a token tensor without a grid', '{ site: seq, kind: uniform, gain: 2, tokens: [[0, 0]] }', ['has no patch grid']],
    ['tokens on a feature map', '{ site: map, kind: uniform, gain: 2, tokens: [0] }', ['is not a token tensor', 'use a window']],
    ['noise at a shared site', '{ site: att, kind: noise, sd: 0.1 }', ['merges the batch with other axes']],
    ['a token selection at a shared site', '{ site: att, kind: uniform, gain: 2, tokens: [0] }', ['is not a token tensor (its first axis is not the batch)']],
  ];
  it.each(BAD_TOKENS)('resolveModulations(spec) rejects %s with a one-line UsageError', (_what, text, parts) => {
    const message = usageMessage(() => resolveTokens(text));
    expect(message.startsWith('spec.yaml: ')).toBe(true);
    for (const part of parts) expect(message).toContain(part);
    expect(message).not.toContain('\n');
  });
});
