import { mkdirSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import fc from 'fast-check';
import { afterAll, describe, expect, it } from 'vitest';
import { stringify as toYaml } from 'yaml';
import { UsageError } from '../../src/errors.js';
import { loadModulationSpec, parseModulationSpec, specToObject, validateModulationSpec } from '../../src/modulation/spec.js';
import { formatNpy } from '../../src/stimuli/npy.js';

const folder = mkdtempSync(join(tmpdir(), 'sonde-spec-'));
afterAll(() => rmSync(folder, { recursive: true, force: true }));

const YAML_SPEC = `
modulations:
  - site: conv3_relu
    kind: tuning
    target: ring
    strength: 0.4
    window: { shape: gaussian, cx: 0.25, cy: 0.75, sigma: 0.1 }
  - site: conv4_relu
    kind: lesion
    channels: [3, 1, 7]
  - site: fc1
    kind: noise
    mode: additive
    sd: 0.05
    seed: 11
  - site: conv2_relu
    kind: gain
    values: [1, 0.5, 2]
`;

const JSON_SPEC = JSON.stringify({
  modulations: [
    { site: 'conv3_relu', kind: 'tuning', target: 'ring', strength: 0.4, window: { shape: 'gaussian', cx: 0.25, cy: 0.75, sigma: 0.1 } },
    { site: 'conv4_relu', kind: 'lesion', channels: [3, 1, 7] },
    { site: 'fc1', kind: 'noise', mode: 'additive', sd: 0.05, seed: 11 },
    { site: 'conv2_relu', kind: 'gain', values: [1, 0.5, 2] },
  ],
});

/** Runs `action`, expects a UsageError and returns its message. */
function usageMessage(action: () => unknown): string {
  try {
    action();
  } catch (error) {
    expect(error).toBeInstanceOf(UsageError);
    return (error as UsageError).message;
  }
  throw new Error('expected a UsageError, nothing was thrown');
}

describe('parseModulationSpec', () => {
  it('parseModulationSpec(uniform with gain) is the gain itself; the older key strength means the same and leaves a notice naming the sweep\'s 1 + β', () => {
    const withGain = parseModulationSpec('{ site: a, kind: uniform, gain: 1.4 }', { source: 'spec.yaml' });
    expect(withGain.modulations[0]).toMatchObject({ kind: 'uniform', strength: 1.4 });
    expect(withGain.notices).toBeUndefined();
    const old = parseModulationSpec('{ site: a, kind: uniform, strength: 1.4 }', { source: 'spec.yaml' });
    expect(old.modulations[0]).toEqual(withGain.modulations[0]);
    expect(old.notices).toHaveLength(1);
    expect(old.notices![0]).toContain('spec.yaml: strength 1.4 of a uniform modulation is the gain itself');
    expect(old.notices![0]).toContain('write gain: 1.4');
    expect(old.notices![0]).toContain("the uniform scheme's strength β is a gain of 1 + β");
    expect(() => parseModulationSpec('{ site: a, kind: uniform, gain: 1.4, strength: 0.4 }', { source: 'spec.yaml' })).toThrow(/strength cannot be combined with gain/);
    // written back with the unambiguous key
    expect(specToObject(old)).toMatchObject({ kind: 'uniform', gain: 1.4 });
    expect(specToObject(old)).not.toHaveProperty('strength');
  });

  it('parseModulationSpec(yaml) and parseModulationSpec(json) give the same spec', () => {
    const fromYaml = parseModulationSpec(YAML_SPEC, { source: 'spec.yaml' });
    const fromJson = parseModulationSpec(JSON_SPEC, { source: 'spec.json' });
    expect(fromYaml.modulations).toStrictEqual(fromJson.modulations);
    expect(fromYaml.form).toBe('list');
    // the same JSON text read by the YAML parser (YAML 1.2 reads JSON) also agrees
    expect(parseModulationSpec(JSON_SPEC, { source: 'spec.txt' }).modulations).toStrictEqual(fromJson.modulations);
  });

  it('parseModulationSpec(text) fills the documented defaults', () => {
    const spec = parseModulationSpec(YAML_SPEC, { source: 'spec.yaml' });
    expect(spec.modulations[0]).toStrictEqual({
      kind: 'tuning',
      site: 'conv3_relu',
      window: { shape: 'gaussian', cx: 0.25, cy: 0.75, sigma: 0.1, outside: 1 },
      allowNegative: false,
      target: 'ring',
      strength: 0.4,
    });
    const noise = parseModulationSpec('{ site: a, kind: noise, sd: 0.1 }', { source: 'n.yaml' });
    expect(noise.form).toBe('single');
    expect(noise.modulations[0]).toStrictEqual({ kind: 'noise', site: 'a', allowNegative: false, mode: 'multiplicative', sd: 0.1, seed: 0 });
    const top = parseModulationSpec('{ site: a, kind: lesion, top: 2, target: ring }', { source: 'l.yaml' });
    expect(top.modulations[0]).toMatchObject({ kind: 'lesion', top: 2, target: 'ring', rankBy: 'tuning' });
  });

  it('parseModulationSpec(text) accepts negative gains with allowNegative: true', () => {
    const spec = parseModulationSpec('{ site: a, kind: uniform, strength: -1, allowNegative: true, window: { shape: box, x0: 0, x1: 0.5, y0: 0, y1: 1, outside: -2 } }', { source: 's.yaml' });
    expect(spec.modulations[0]).toMatchObject({ strength: -1, allowNegative: true, window: { outside: -2 } });
    // offsets are additive: negative offsets need no permission
    expect(parseModulationSpec('{ site: a, kind: offset, values: [-1, 2] }', { source: 's.yaml' }).modulations[0]).toMatchObject({ values: [-1, 2] });
  });

  it('parseModulationSpec(text) reports a bad strength with source, field path and value', () => {
    const text = JSON.stringify({ modulations: [{ site: 'a', kind: 'uniform', strength: 1 }, { site: 'b', kind: 'uniform', strength: 'abc' }] });
    expect(usageMessage(() => parseModulationSpec(text, { source: 'spec.yaml' }))).toBe('spec.yaml: modulations[1].strength must be a finite number, got "abc"');
  });

  // every bad input: [what, spec text (YAML unless the source says .json), field path the message must contain]
  const BAD: Array<[string, string, string]> = [
    ['NaN strength', '{ site: a, kind: uniform, strength: .nan }', 'strength must be a finite number, got NaN'],
    ['Inf in a values list', 'modulations: [{ site: a, kind: gain, values: [1, .inf] }]', 'modulations[0].values[1] must be a finite number, got Infinity'],
    ['text in a values list', '{ site: a, kind: offset, values: [1, "2"] }', 'values[1] must be a finite number, got "2"'],
    ['window x1 above 1', '{ site: a, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 1.5, y0: 0, y1: 1 } }', 'window.x1 must be in [0, 1]'],
    ['window x0 below 0', '{ site: a, kind: uniform, strength: 2, window: { shape: box, x0: -0.1, x1: 1, y0: 0, y1: 1 } }', 'window.x0 must be in [0, 1]'],
    ['window cy above 1', '{ site: a, kind: uniform, strength: 2, window: { shape: gaussian, cx: 0.5, cy: 2, sigma: 0.1 } }', 'window.cy must be in [0, 1]'],
    ['box with x0 = x1', '{ site: a, kind: uniform, strength: 2, window: { shape: box, x0: 0.5, x1: 0.5, y0: 0, y1: 1 } }', 'window.x0 (0.5) must be less than window.x1 (0.5)'],
    ['box with y0 > y1', '{ site: a, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 1, y0: 0.8, y1: 0.2 } }', 'window.y0 (0.8) must be less than window.y1 (0.2)'],
    ['sigma 0', '{ site: a, kind: uniform, strength: 2, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0 } }', 'window.sigma must be > 0, got 0'],
    ['sigma negative', '{ site: a, kind: uniform, strength: 2, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: -1 } }', 'window.sigma must be > 0'],
    ['missing box corner', '{ site: a, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 1, y0: 0 } }', 'window.y1 is required'],
    ['unknown window shape', '{ site: a, kind: uniform, strength: 2, window: { shape: disc } }', 'window.shape must be box or gaussian, got "disc"'],
    ['unknown window key', '{ site: a, kind: uniform, strength: 2, window: { shape: gaussian, cx: 0.5, cy: 0.5, sigma: 0.1, radius: 2 } }', 'window.radius is not a key of a gaussian window'],
    ['negative gain value', 'modulations: [{ site: a, kind: gain, values: [1, -0.5] }]', 'modulations[0].values[1] is -0.5; gains must be ≥ 0'],
    ['negative uniform gain', '{ site: a, kind: uniform, strength: -1 }', 'strength is -1; gains must be ≥ 0'],
    ['negative outside gain', '{ site: a, kind: uniform, strength: 2, window: { shape: box, x0: 0, x1: 1, y0: 0, y1: 0.5, outside: -1 } }', 'window.outside is -1; gains must be ≥ 0'],
    ['empty modulation list', 'modulations: []', 'modulations is empty'],
    ['modulations not a list', 'modulations: { site: a }', 'modulations must be a list'],
    ['extra key beside modulations', 'modulations: [{ site: a, kind: uniform, strength: 1 }]\nversion: 2', 'version is not allowed next to modulations'],
    ['duplicate sites', 'modulations: [{ site: a, kind: uniform, strength: 1 }, { site: a, kind: noise, sd: 1 }]', 'modulations[1].site "a" is already modulated by modulations[0]'],
    ['missing gain vector', '{ site: a, kind: gain }', 'values is required'],
    ['missing offset vector', 'modulations: [{ site: a, kind: offset }]', 'modulations[0].values is required'],
    ['empty values list', '{ site: a, kind: gain, values: [] }', 'values is empty'],
    ['values of another type', '{ site: a, kind: gain, values: 3 }', 'values must be a list of numbers or a .npy/.csv path, got 3'],
    ['misspelt key', '{ site: a, kind: uniform, strenght: 2 }', 'strenght is not a key of a "uniform" modulation (closest: "strength")'],
    ['key the kind does not use', '{ site: a, kind: gain, values: [1], strength: 2 }', 'strength is not used by kind "gain"'],
    ['outside at the modulation level', '{ site: a, kind: uniform, strength: 2, outside: 1 }', 'outside belongs inside window'],
    ['misspelt kind', '{ site: a, kind: gian, values: [1] }', 'kind must be one of gain, uniform, offset, lesion, noise, tuning, sensitivity, got "gian" (closest: "gain")'],
    ['missing kind', 'modulations: [{ site: a }]', 'modulations[0].kind is required'],
    ['missing site', '{ kind: uniform, strength: 1 }', 'site is required'],
    ['empty site', '{ site: "", kind: uniform, strength: 1 }', 'site must be a non-empty tensor name'],
    ['lesion with channels and top', '{ site: a, kind: lesion, channels: [1], top: 2 }', 'top cannot be combined with channels'],
    ['lesion with neither', '{ site: a, kind: lesion }', 'channels is required'],
    ['lesion channel negative', '{ site: a, kind: lesion, channels: [0, -1] }', 'channels[1] must be a channel index (integer ≥ 0), got -1'],
    ['lesion channel fractional', '{ site: a, kind: lesion, channels: [1.5] }', 'channels[0] must be a channel index'],
    ['lesion channel repeated', '{ site: a, kind: lesion, channels: [2, 4, 2] }', 'channels[2] repeats channel 2'],
    ['lesion empty channel list', '{ site: a, kind: lesion, channels: [] }', 'channels is empty'],
    ['lesion top 0', '{ site: a, kind: lesion, top: 0, target: ring }', 'top must be an integer ≥ 1, got 0'],
    ['lesion top without target', '{ site: a, kind: lesion, top: 3 }', 'target is required'],
    ['lesion channels with target', '{ site: a, kind: lesion, channels: [1], target: ring }', 'target is only used with top'],
    ['lesion rankBy unknown', '{ site: a, kind: lesion, top: 1, target: ring, rankBy: size }', 'rankBy must be tuning or sensitivity'],
    ['noise sd negative', '{ site: a, kind: noise, sd: -0.1 }', 'sd must be ≥ 0, got -0.1'],
    ['noise without sd', '{ site: a, kind: noise }', 'sd is required'],
    ['noise mode unknown', '{ site: a, kind: noise, sd: 1, mode: both }', 'mode must be multiplicative or additive, got "both"'],
    ['noise seed negative', '{ site: a, kind: noise, sd: 1, seed: -3 }', 'seed must be an integer in [0, 4294967295]'],
    ['noise seed fractional', '{ site: a, kind: noise, sd: 1, seed: 1.5 }', 'seed must be an integer'],
    ['tuning target as number', '{ site: a, kind: tuning, strength: 1, target: 3 }', 'target must be a category name (text), got the number 3'],
    ['tuning without strength', '{ site: a, kind: tuning, target: ring }', 'strength is required'],
    ['sensitivity without target', '{ site: a, kind: sensitivity, strength: 1 }', 'target is required'],
    ['allowNegative not boolean', '{ site: a, kind: uniform, strength: 1, allowNegative: "yes" }', 'allowNegative must be true or false, got "yes"'],
    ['bare list', '- { site: a, kind: uniform, strength: 1 }', 'the spec is a bare list; wrap it as { modulations: [...] }'],
    ['empty text', '', 'the spec is empty'],
    ['a scalar', '42', 'the spec must be a modulation object'],
    ['a list item that is not an object', 'modulations: [3]', 'modulations[0] must be a modulation object'],
    ['broken YAML', 'site: [a, b\nkind: gain', 'not valid YAML'],
    ['duplicate YAML key', 'site: a\nsite: b\nkind: uniform\nstrength: 1', 'not valid YAML'],
    ['values file with another extension', '{ site: a, kind: gain, values: gains.txt }', 'values "gains.txt": values files must end in .npy or .csv'],
    ['values file missing', '{ site: a, kind: gain, values: absent.csv }', 'values "absent.csv": file not found'],
  ];
  it.each(BAD)('parseModulationSpec(text) rejects %s with a one-line UsageError naming the field', (_what, text, expected) => {
    const message = usageMessage(() => parseModulationSpec(text, { source: join(folder, 'bad.yaml') }));
    expect(message).toContain(expected);
    expect(message.startsWith(`${join(folder, 'bad.yaml')}: `)).toBe(true);
    expect(message).not.toContain('\n');
  });

  it('parseModulationSpec(json) rejects malformed JSON and NaN literals', () => {
    expect(usageMessage(() => parseModulationSpec('{"site": "a", "kind": "uniform", "strength": NaN}', { source: 'spec.json' }))).toMatch(/^spec\.json: not valid JSON/);
  });
});

describe('loadModulationSpec', () => {
  it('loadModulationSpec(path) reads values from .npy and .csv files relative to the spec file', () => {
    mkdirSync(join(folder, 'specs'), { recursive: true });
    mkdirSync(join(folder, 'data'), { recursive: true });
    writeFileSync(join(folder, 'data', 'gains.npy'), formatNpy(Float32Array.from([1.5, 0.25, 1]), [3]));
    writeFileSync(join(folder, 'specs', 'offsets.csv'), 'channel,value\n0,-0.5\n1,0\n2,2e-1\n');
    const specPath = join(folder, 'specs', 'spec.yaml');
    writeFileSync(
      specPath,
      'modulations:\n  - { site: a, kind: gain, values: ../data/gains.npy }\n  - { site: b, kind: offset, values: offsets.csv }\n',
    );
    const spec = loadModulationSpec(specPath);
    expect(spec.modulations[0]).toMatchObject({ kind: 'gain', values: [1.5, 0.25, 1], valuesFile: join(folder, 'data', 'gains.npy') });
    expect(spec.modulations[1]).toMatchObject({ kind: 'offset', values: [-0.5, 0, 0.2], valuesFile: join(folder, 'specs', 'offsets.csv') });
    // the file form inlines the numbers and drops the provenance: it parses back to the same modulations
    const again = validateModulationSpec(specToObject(spec), { source: specPath });
    const withoutProvenance = spec.modulations.map((m) => {
      const copy: Record<string, unknown> = { ...m };
      delete copy['valuesFile'];
      return copy;
    });
    expect(again.modulations).toStrictEqual(withoutProvenance);
  });

  it('loadModulationSpec(path) rejects NaN inside values files, naming the field and line', () => {
    writeFileSync(join(folder, 'nan.csv'), '1\nnan\n');
    writeFileSync(join(folder, 'nan.npy'), formatNpy(Float64Array.from([1, Number.NaN]), [2]));
    writeFileSync(join(folder, 'neg.npy'), formatNpy(Float64Array.from([1, -2]), [2]));
    writeFileSync(join(folder, 'nan.yaml'), '{ site: a, kind: gain, values: nan.csv }');
    writeFileSync(join(folder, 'nan-npy.yaml'), '{ site: a, kind: gain, values: nan.npy }');
    writeFileSync(join(folder, 'neg.yaml'), '{ site: a, kind: gain, values: neg.npy }');
    expect(usageMessage(() => loadModulationSpec(join(folder, 'nan.yaml')))).toContain('values "nan.csv" line 2: "nan" is not finite');
    expect(usageMessage(() => loadModulationSpec(join(folder, 'nan-npy.yaml')))).toContain('values "nan.npy": element 1 is NaN');
    expect(usageMessage(() => loadModulationSpec(join(folder, 'neg.yaml')))).toContain(`values[1] (from ${join(folder, 'neg.npy')}) is -2; gains must be ≥ 0`);
  });

  it('loadModulationSpec(path) reports a missing spec file as a UsageError', () => {
    expect(usageMessage(() => loadModulationSpec(join(folder, 'nope.yaml')))).toContain('not found');
  });
});

// ---- properties -------------------------------------------------------------------------------------

const finite = (min: number, max: number): fc.Arbitrary<number> =>
  fc.double({ min, max, noNaN: true, noDefaultInfinity: true }).map((v) => (Object.is(v, -0) ? 0 : v));
const unit = finite(0, 1);

const windowArb = fc.oneof(
  fc.tuple(unit, unit, unit, unit, finite(0, 5)).filter(([a, b, c, d]) => a !== b && c !== d).map(([a, b, c, d, outside]) => ({
    shape: 'box' as const,
    x0: Math.min(a, b),
    x1: Math.max(a, b),
    y0: Math.min(c, d),
    y1: Math.max(c, d),
    outside,
  })),
  fc.record({ shape: fc.constant('gaussian' as const), cx: unit, cy: unit, sigma: finite(1e-6, 10).filter((s) => s > 0), outside: finite(0, 5) }),
);

function modulationArb(text: fc.Arbitrary<string>): fc.Arbitrary<Record<string, unknown>> {
  const kindPart = fc.oneof(
    fc.record({ kind: fc.constant('gain'), values: fc.array(finite(0, 1e6), { minLength: 1, maxLength: 6 }) }),
    fc.record({ kind: fc.constant('uniform'), gain: finite(0, 100) }),
    fc.record({ kind: fc.constant('offset'), values: fc.array(finite(-1e6, 1e6), { minLength: 1, maxLength: 6 }) }),
    fc.record({ kind: fc.constant('lesion'), channels: fc.uniqueArray(fc.nat(4096), { minLength: 1, maxLength: 6 }) }),
    fc.record({ kind: fc.constant('lesion'), top: fc.integer({ min: 1, max: 512 }), target: text, rankBy: fc.constantFrom('tuning', 'sensitivity') }),
    fc.record({
      kind: fc.constant('noise'),
      mode: fc.constantFrom('multiplicative', 'additive'),
      sd: finite(0, 10),
      seed: fc.oneof(fc.integer({ min: 0, max: 0xffffffff }), text),
    }),
    fc.record({ kind: fc.constantFrom('tuning', 'sensitivity'), target: text, strength: finite(-10, 10) }),
  );
  return fc.tuple(kindPart, fc.option(windowArb, { nil: undefined })).map(([part, window]) => ({
    ...part,
    allowNegative: false,
    ...(window === undefined ? {} : { window }),
  }));
}

/** Canonical specs (every default written out), with distinct site names. */
function specArb(text: fc.Arbitrary<string>): fc.Arbitrary<Record<string, unknown>> {
  return fc
    .uniqueArray(text, { minLength: 1, maxLength: 4 })
    .chain((sites) => fc.tuple(...sites.map(() => modulationArb(text))).map((parts) => parts.map((p, i) => ({ site: sites[i], ...p }))))
    .chain((modulations) => (modulations.length === 1 ? fc.constantFrom<Record<string, unknown>>(modulations[0]!, { modulations }) : fc.constant({ modulations })));
}

describe('parseModulationSpec properties', () => {
  it('parseModulationSpec(JSON.stringify(spec)) returns every valid spec unchanged (fast-check)', () => {
    fc.assert(
      fc.property(specArb(fc.string({ minLength: 1, maxLength: 12 })), (spec) => {
        const parsed = parseModulationSpec(JSON.stringify(spec), { source: 'random.json' });
        expect(specToObject(parsed)).toEqual(spec);
      }),
      { numRuns: 300 },
    );
  });

  it('parseModulationSpec(yaml.stringify(spec)) returns every valid spec unchanged (fast-check)', () => {
    const word = fc.stringMatching(/^[a-z][a-z0-9_.:/-]{0,10}$/);
    fc.assert(
      fc.property(specArb(word), (spec) => {
        const parsed = parseModulationSpec(toYaml(spec), { source: 'random.yaml' });
        expect(specToObject(parsed)).toEqual(spec);
      }),
      { numRuns: 200 },
    );
  });

  const onlyUsageErrors = (run: () => unknown): boolean => {
    try {
      run();
    } catch (error) {
      if (!(error instanceof UsageError)) throw error;
      expect(error.message).not.toContain('\n');
    }
    return true;
  };

  it('parseModulationSpec(junk) throws nothing but one-line UsageErrors (fast-check)', () => {
    fc.assert(fc.property(fc.string({ maxLength: 80 }), (text) => onlyUsageErrors(() => parseModulationSpec(text, { source: join(folder, 'junk.yaml') }))), { numRuns: 400 });
    fc.assert(fc.property(fc.jsonValue(), (value) => onlyUsageErrors(() => parseModulationSpec(JSON.stringify(value) ?? '', { source: join(folder, 'junk.json') }))), { numRuns: 400 });
  });

  it('validateModulationSpec(spec with one field replaced by junk) throws nothing but UsageErrors (fast-check)', () => {
    const junk = fc.oneof(fc.jsonValue(), fc.constantFrom(Number.NaN, Number.POSITIVE_INFINITY, -1, 0, 1.5, '', [], {}));
    fc.assert(
      fc.property(modulationArb(fc.string({ minLength: 1, maxLength: 6 })), fc.nat(), fc.string({ maxLength: 8 }), junk, (modulation, keyIndex, extraKey, value) => {
        const keys = [...Object.keys(modulation), 'site', extraKey];
        const key = keys[keyIndex % keys.length]!;
        const broken = { site: 's', ...modulation, [key]: value };
        return onlyUsageErrors(() => validateModulationSpec(broken, { source: join(folder, 'junk.yaml') }));
      }),
      { numRuns: 400 },
    );
  });
});

describe('parseModulationSpec (token selections and heads)', () => {
  it('parseModulationSpec(tokens list or object, per: head, heads) reads them with their defaults', () => {
    const listed = parseModulationSpec('{ site: a, kind: uniform, gain: 2, tokens: [class, 5, [1, 2], patches] }', { source: 's.yaml' }).modulations[0]!;
    expect(listed.tokens).toStrictEqual({ at: ['class', 5, [1, 2], 'patches'], outside: 1 });
    const object = parseModulationSpec('{ site: a, kind: uniform, gain: 2, tokens: { at: [0], outside: 0.5 } }', { source: 's.yaml' }).modulations[0]!;
    expect(object.tokens).toStrictEqual({ at: [0], outside: 0.5 });
    const heads = parseModulationSpec('{ site: a, kind: gain, per: head, headCount: 2, values: [1, 0.5] }', { source: 's.yaml' }).modulations[0]!;
    expect(heads).toMatchObject({ per: 'head', headCount: 2, values: [1, 0.5] });
    const lesion = parseModulationSpec('{ site: a, kind: lesion, heads: [3, 0] }', { source: 's.yaml' }).modulations[0]!;
    expect(lesion).toStrictEqual({ kind: 'lesion', site: 'a', per: 'head', allowNegative: false, channels: [3, 0] });
    // per: feature is the default and leaves no key
    expect('per' in parseModulationSpec('{ site: a, kind: gain, per: feature, values: [1] }', { source: 's.yaml' }).modulations[0]!).toBe(false);
  });

  it('validateModulationSpec(specToObject(spec)) returns token and head specs unchanged (lesions of heads written as heads: [..])', () => {
    const spec = parseModulationSpec(`
modulations:
  - { site: a, kind: lesion, heads: [1], headCount: 4 }
  - { site: b, kind: tuning, target: ring, strength: 0.5, per: head, tokens: { at: [class, [0, 1]], outside: 0.25 } }
`, { source: 's.yaml' });
    const object = specToObject(spec) as { modulations: Array<Record<string, unknown>> };
    expect(object.modulations[0]!['heads']).toEqual([1]);
    expect(validateModulationSpec(object, { source: 's.yaml' }).modulations).toStrictEqual(spec.modulations);
  });

  const BAD_TOKENS: Array<[string, string, string]> = [
    ['tokens with a window', '{ site: a, kind: uniform, gain: 2, tokens: [0], window: { shape: box, x0: 0, x1: 1, y0: 0, y1: 1 } }', 'tokens cannot be combined with window'],
    ['a token that is not an index, class, patches or a patch', '{ site: a, kind: uniform, gain: 2, tokens: [first] }', 'tokens must be a list of tokens'],
    ['a negative token index', '{ site: a, kind: uniform, gain: 2, tokens: [-1] }', 'tokens must be a list of tokens'],
    ['an empty token list', '{ site: a, kind: uniform, gain: 2, tokens: [] }', 'tokens must be a list of tokens'],
    ['a repeated token', '{ site: a, kind: uniform, gain: 2, tokens: [3, 3] }', 'tokens[1] repeats 3'],
    ['a negative outside gain', '{ site: a, kind: uniform, gain: 2, tokens: { at: [0], outside: -1 } }', 'tokens.outside is -1; gains must be ≥ 0'],
    ['an unknown key in a token object', '{ site: a, kind: uniform, gain: 2, tokens: { at: [0], inside: 2 } }', 'tokens must be a list of tokens'],
    ['per with another word', '{ site: a, kind: gain, per: token, values: [1] }', 'per must be feature or head, got "token"'],
    ['headCount without per: head', '{ site: a, kind: gain, headCount: 2, values: [1] }', 'headCount is only used with per: head'],
    ['headCount of 0', '{ site: a, kind: gain, per: head, headCount: 0, values: [1] }', 'headCount must be an integer ≥ 1'],
    ['per: head on noise', '{ site: a, kind: noise, sd: 0.1, per: head }', 'per is head, but noise is drawn per feature'],
    ['heads with channels', '{ site: a, kind: lesion, heads: [0], channels: [1] }', 'heads cannot be combined with channels'],
    ['heads with per: feature', '{ site: a, kind: lesion, heads: [0], per: feature }', 'lists heads, but per is feature'],
    ['heads on a gain', '{ site: a, kind: gain, values: [1], heads: [0] }', 'heads is not used by kind "gain"'],
    ['a repeated head', '{ site: a, kind: lesion, heads: [2, 2] }', 'heads[1] repeats head 2'],
  ];
  it.each(BAD_TOKENS)('parseModulationSpec(text) rejects %s with a one-line UsageError naming the field', (_what, text, expected) => {
    const message = usageMessage(() => parseModulationSpec(text, { source: 'bad.yaml' }));
    expect(message).toContain(expected);
    expect(message.startsWith('bad.yaml: ')).toBe(true);
    expect(message).not.toContain('\n');
  });
});
