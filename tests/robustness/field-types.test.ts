/**
 * Fields of the wrong type in manifests, sidecars and partial files are refused by their schema with
 * the field's path, by `check` and by every reader, instead of flowing into a computation (a string
 * threshold, a number where a list is expected). Also: a modulated manifest may not map a layer onto
 * another layer's baseline file, nor two layers onto one. The expected outcome of each case follows
 * from the documented manifest contract (README "Snapshot format").
 */
import { cpSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readSidecar } from '../../src/graph/sidecar.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { readPartial, writePartial, PARTIAL_KIND, PARTIAL_VERSION } from '../../src/record/partial-file.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let base: string;
let mod: string;

type Json = Record<string, unknown>;

function copyWith(name: string, from: string, edit: (m: Json & { layers: Json[] }) => void): string {
  const folder = join(dir, name);
  cpSync(from, folder, { recursive: true });
  const path = join(folder, 'manifest.json');
  const m = JSON.parse(readFileSync(path, 'utf8')) as Json & { layers: Json[] };
  edit(m);
  writeFileSync(path, JSON.stringify(m, null, 2));
  return folder;
}

beforeAll(async () => {
  dir = tempFolder('sonde-fields-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2 }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds: ['cat', 'dog'], threshold: 0 } }));
  const s = writeStimuliNpy(dir, [9, 3, 16, 16]);
  base = (await recordSnapshot({ model, stimuli: s.npy, labels: s.labels, out: join(dir, 'base'), layers: 'all', batch: 4 })).folder;
  writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.4\n');
  mod = (await recordModulated({ model, stimuli: s.npy, labels: s.labels, out: join(dir, 'mod'), modulate: join(dir, 'spec.yaml'), from: base })).folder;
}, 60_000);

describe('manifest fields by schema', () => {
  const cases: Array<[string, (m: Json & { layers: Json[] }) => void, RegExp]> = [
    ['readout.threshold "x"', (m) => ((m.readout as Json).threshold = 'x'), /readout\.threshold must be a number \(got "x"\)/],
    ['readout.kinds 5', (m) => ((m.readout as Json).kinds = 5), /readout\.kinds must be a list \(got 5\)/],
    ['run deleted', (m) => delete m.run, /run must be an object \(missing\)/],
    ['layers[1].depth "x"', (m) => (m.layers[1]!.depth = 'x'), /layers\[1\]\.depth must be a number \(got "x"\)/],
    ['layers[0].op 7', (m) => (m.layers[0]!.op = 7), /layers\[0\]\.op must be a string \(got 7\)/],
    ['preprocessing "abc"', (m) => (m.preprocessing = 'abc'), /preprocessing must be an object \(got "abc"\)/],
    ['stimuli.categories [1]', (m) => ((m.stimuli as Json).categories = [1]), /stimuli\.categories\[0\] must be a string/],
    ['created 0', (m) => (m.created = 0), /created must be a string/],
    ['layers[0].shape [2.5]', (m) => (m.layers[0]!.shape = [2.5]), /layers\[0\]\.shape\[0\] must be an integer/],
    ['run.threads -1', (m) => ((m.run as Json).threads = -1), /run\.threads must be at least 0/],
    ['tool missing', (m) => delete m.tool, /tool must be an object \(missing\)/],
  ];
  for (const [name, edit, message] of cases) {
    it(`checkSnapshot and openSnapshot refuse ${name}, naming the field path`, async () => {
      const folder = copyWith(name.replace(/\W+/g, '-'), base, edit);
      const report = await checkSnapshot(folder);
      expect(report.ok).toBe(false);
      expect(report.problems[0]!.message).toMatch(message);
      expect(() => openSnapshot(folder)).toThrow(message);
    });
  }

  it('diff with a string threshold in the manifest exits 2 with one line instead of inventing detection numbers', async () => {
    const a = copyWith('threshold-x', base, (m) => ((m.readout as Json).threshold = 'x'));
    const result = await runSonde(['diff', a, mod, '--task', 'detect:all', '--json']);
    expect(result.code).toBe(2);
    expect(result.stdout).toBe('');
    expect(result.stderr.trim().split('\n')).toHaveLength(1);
    expect(result.stderr).toMatch(/readout\.threshold/);
  });
});

describe('readSidecar fields by schema', () => {
  const cases: Array<[string, unknown, RegExp]> = [
    ['outputs.threshold "x"', { outputs: { name: 'logits', kinds: ['a'], threshold: 'x' } }, /outputs\.threshold must be a number \(got "x"\)/],
    ['outputs.kinds 5', { outputs: { name: 'logits', kinds: 5 } }, /outputs\.kinds must be a list \(got 5\)/],
    ['preprocessing.bgr "yes"', { preprocessing: { bgr: 'yes' } }, /preprocessing\.bgr must be a boolean/],
    ['preprocessing.std [0]', { preprocessing: { std: [0] } }, /preprocessing\.std\[0\] must not be 0/],
    ['layers[0].name 3', { layers: [{ name: 3 }] }, /layers\[0\]\.name must be a string/],
  ];
  for (const [name, value, message] of cases) {
    it(`readSidecar refuses ${name}`, () => {
      const model = join(dir, `${name.replace(/\W+/g, '-')}.onnx`);
      writeFileSync(model.replace(/\.onnx$/, '.json'), JSON.stringify(value));
      expect(() => readSidecar(model)).toThrow(message);
    });
  }
});

describe('readPartial envelope by schema', () => {
  const valid = () => ({ kind: PARTIAL_KIND, version: PARTIAL_VERSION, of: 'tune' as const, shard: { index: 1, count: 2, stimuli: [0, 4] as [number, number], total: 9 }, key: { a: 1 }, data: { b: 2 } });
  it('readPartial(written file) returns it; a wrong-typed field names its path', () => {
    const path = join(dir, 'part.json');
    writePartial(path, valid());
    expect(readPartial(path).key).toEqual({ a: 1 });
    const edits: Array<[string, (v: Json) => void, RegExp]> = [
      ['shard.index', (v) => ((v.shard as Json).index = 'x'), /shard\.index must be a number/],
      ['shard.stimuli', (v) => ((v.shard as Json).stimuli = [0]), /shard\.stimuli/],
      ['key', (v) => (v.key = 5), /key must be (an object|a record)/],
      ['of', (v) => (v.of = 'sweep'), /of must be "diff" or "tune" or "sense"/],
    ];
    for (const [, edit, message] of edits) {
      const v = JSON.parse(readFileSync(path, 'utf8')) as Json;
      edit(v);
      writeFileSync(join(dir, 'bad-part.json'), JSON.stringify(v));
      expect(() => readPartial(join(dir, 'bad-part.json'))).toThrow(message);
    }
  });
});

describe('modulated manifests against their baseline', () => {
  it('a from-baseline layer pointed at another layer\'s file (with that file\'s hash, size and rows) is refused by check and by readers', async () => {
    const folder = copyWith('cross-mapped', mod, (m) => {
      const upstream = m.layers.filter((l) => l.from === 'baseline');
      expect(upstream.length).toBeGreaterThanOrEqual(2);
      const [a, b] = upstream as [Json, Json];
      for (const key of ['file', 'sha256', 'bytes', 'rows']) a[key] = b[key];
    });
    const report = await checkSnapshot(folder);
    expect(report.ok).toBe(false);
    expect(report.problems.map((p) => p.message).join('\n')).toMatch(/is used by two layers/);
    expect(() => openSnapshot(folder)).toThrow(/is used by two layers/);
    const diff = await runSonde(['diff', base, folder, '--json']);
    expect(diff.code).toBe(2);
  });

  it('a from-baseline layer pointed at another layer\'s file, while no other entry uses that file, is refused (the baseline\'s layer of that name has another file)', async () => {
    const folder = copyWith('remapped', mod, (m) => {
      const upstream = m.layers.filter((l) => l.from === 'baseline') as Json[];
      const recorded = m.layers.filter((l) => l.from !== 'baseline') as Json[];
      // swap the files of the first upstream layer and a recorded layer's baseline counterpart
      const baseManifest = JSON.parse(readFileSync(join(base, 'manifest.json'), 'utf8')) as { layers: Json[] };
      const donor = baseManifest.layers.find((l) => l.name === recorded[0]!.name)!;
      for (const key of ['file', 'sha256', 'bytes', 'rows']) upstream[0]![key] = donor[key];
    });
    const report = await checkSnapshot(folder);
    expect(report.ok).toBe(false);
    expect(report.problems.map((p) => p.message).join('\n')).toMatch(/is taken from the baseline with file .* but the baseline's layer .* has/);
    expect(() => openSnapshot(folder)).toThrow(/is taken from the baseline with file/);
    const diff = await runSonde(['diff', base, folder, '--json']);
    expect(diff.code).toBe(2);
    expect(diff.stdout).toBe('');
  });

  it('a layer whose shape differs from the baseline\'s layer of that name is named by check', async () => {
    const folder = copyWith('reshaped', mod, (m) => {
      const recorded = m.layers.find((l) => l.from !== 'baseline')!;
      recorded.shape = [...(recorded.shape as number[]), 1];
    });
    const report = await checkSnapshot(folder);
    expect(report.problems.map((p) => p.message).join('\n')).toMatch(/has shape .* the baseline's/);
  });
});
