/**
 * The bad-input corpus: every command, fed broken models, stimuli, specs, snapshots, manifests and
 * partial files. Each case says which files to create, the argv, the exit code (2 usage, 1 runtime) and
 * a pattern the one-line message must match. Every case must print exactly one line on stderr, no stack
 * trace, and never leave a snapshot marked complete where it writes one.
 */
import { cpSync, existsSync, mkdirSync, readFileSync, rmSync, truncateSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import sharp from 'sharp';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;

/** Paths of the shared good fixtures. */
const good = {
  model: '',
  npy: '',
  labels: '',
  base: '',
  mod: '',
  otherModelBase: '',
  otherStimuliBase: '',
  unlabelled: '',
  spec: '',
};

function randomBytes(path: string, length: number, seed: string): string {
  const rng = createRandom(seed);
  writeFileSync(path, Uint8Array.from({ length }, () => rng.int(256)));
  return path;
}

/** A copy of the baseline snapshot whose manifest is changed by `edit`. */
function copyWithManifest(name: string, edit: (m: Record<string, unknown> & { layers: Array<Record<string, unknown>> }) => void): string {
  const target = join(dir, name);
  cpSync(good.base, target, { recursive: true });
  const path = join(target, 'manifest.json');
  const manifest = JSON.parse(readFileSync(path, 'utf8')) as Record<string, unknown> & { layers: Array<Record<string, unknown>> };
  edit(manifest);
  writeFileSync(path, JSON.stringify(manifest));
  return target;
}

/** A copy of the baseline snapshot with one of its files changed by `edit`. */
function copyWithFile(name: string, file: (m: { layers: Array<{ file: string }> }) => string, edit: (path: string) => void): string {
  const target = join(dir, name);
  cpSync(good.base, target, { recursive: true });
  const manifest = JSON.parse(readFileSync(join(target, 'manifest.json'), 'utf8')) as { layers: Array<{ file: string }> };
  edit(join(target, file(manifest)));
  return target;
}

const firstLayer = (m: { layers: Array<{ file: string }> }) => m.layers[0]!.file;

interface Case {
  name: string;
  /** Creates the case's files; returns the argv. */
  argv: () => string[] | Promise<string[]>;
  code: 1 | 2;
  message: RegExp;
  /** A folder the command writes into: it must never hold a complete snapshot afterwards. */
  writes?: string;
}

const record = (model: string, out: string, extra: string[] = []) => ['record', model, '--stimuli', good.npy, '--labels', good.labels, '--out', out, ...extra];
const spec = (name: string, text: string) => {
  const path = join(dir, name);
  writeFileSync(path, text);
  return path;
};

const cases: Case[] = [
  // --- models
  { name: 'random-byte ONNX', argv: () => ['layers', randomBytes(join(dir, 'random.onnx'), 400, 'onnx')], code: 2, message: /random\.onnx is not a valid ONNX file/ },
  {
    name: 'truncated ONNX',
    argv: () => {
      const bytes = buildTinyNet();
      writeFileSync(join(dir, 'cut.onnx'), bytes.subarray(0, Math.floor(bytes.length * 0.4)));
      return record(join(dir, 'cut.onnx'), join(dir, 'out-cut'));
    },
    code: 2,
    message: /cut\.onnx (is not a valid ONNX file|.*nothing produces)/,
    writes: 'out-cut',
  },
  { name: 'zero-byte ONNX', argv: () => (writeFileSync(join(dir, 'zero.onnx'), ''), ['layers', join(dir, 'zero.onnx')]), code: 2, message: /zero\.onnx.*empty/ },
  {
    name: 'model missing an initializer',
    argv: () => {
      const model = onnxProto.onnx.ModelProto.decode(buildTinyNet());
      model.graph!.initializer = model.graph!.initializer!.filter((t) => t.name !== 'W1');
      writeFileSync(join(dir, 'noinit.onnx'), onnxProto.onnx.ModelProto.encode(model).finish());
      return record(join(dir, 'noinit.onnx'), join(dir, 'out-noinit'));
    },
    code: 2,
    message: /reads tensor "W1", which nothing produces \(missing initializer\?\)/,
    writes: 'out-noinit',
  },
  { name: 'model path is a folder', argv: () => ['layers', dir], code: 2, message: /is a directory/ },
  { name: 'missing model', argv: () => ['sense', join(dir, 'absent.onnx'), '--site', 'relu1', '--out', join(dir, 's.arrow'), '--stimuli', good.npy], code: 2, message: /absent\.onnx does not exist/ },
  {
    name: 'absurd --input-shape',
    argv: () => (writeFileSync(join(dir, 'dyn.onnx'), buildTinyNet({ dynamicSpatial: true })), ['layers', join(dir, 'dyn.onnx'), '--input-shape', '1x3x60000x60000']),
    code: 2,
    message: /shape \[1, 3, 60000, 60000\] is absurdly large/,
  },
  { name: 'random-byte ONNX to sweep', argv: () => ['sweep', randomBytes(join(dir, 'sweep.onnx'), 300, 'sweep'), '--from', good.base, '--sites', 'relu1', '--task', 'detect:cat', '--out', join(dir, 'sw')], code: 2, message: /not a valid ONNX file|different model/ },

  // --- stimuli
  { name: 'random bytes as .npy', argv: () => ['record', good.model, '--stimuli', randomBytes(join(dir, 'random.npy'), 500, 'npy'), '--out', join(dir, 'out-npy')], code: 2, message: /random\.npy/, writes: 'out-npy' },
  { name: 'zero-byte .npy', argv: () => (writeFileSync(join(dir, 'zero.npy'), ''), ['record', good.model, '--stimuli', join(dir, 'zero.npy'), '--out', join(dir, 'out-znpy')]), code: 2, message: /zero\.npy/, writes: 'out-znpy' },
  {
    name: '.npy with an absurd shape and little data',
    argv: () => {
      const header = "{'descr': '<f4', 'fortran_order': False, 'shape': (100000000, 3, 16, 16), }";
      const text = `${header}${' '.repeat(117 - header.length)}\n`; // 10 + 118 bytes: the header ends on a 64-byte boundary
      const bytes = new Uint8Array(10 + text.length + 64);
      bytes.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]);
      new DataView(bytes.buffer).setUint16(8, text.length, true);
      for (let i = 0; i < text.length; i++) bytes[10 + i] = text.charCodeAt(i);
      writeFileSync(join(dir, 'absurd.npy'), bytes);
      return ['record', good.model, '--stimuli', join(dir, 'absurd.npy'), '--out', join(dir, 'out-absurd')];
    },
    code: 2,
    message: /absurd\.npy: data is truncated/,
    writes: 'out-absurd',
  },
  {
    name: '.npy of the wrong rank',
    argv: () => {
      const sub = join(dir, 'rank');
      mkdirSync(sub, { recursive: true });
      const { npy } = writeStimuliNpy(sub, [2, 3, 16, 16]);
      const bytes = readFileSync(npy);
      const text = bytes.toString('latin1').replace('(2, 3, 16, 16)', '(2, 768)      ');
      writeFileSync(join(sub, 'flat.npy'), Buffer.from(text, 'latin1'));
      return ['record', good.model, '--stimuli', join(sub, 'flat.npy'), '--out', join(dir, 'out-rank')];
    },
    code: 2,
    message: /expected \[N, C, H, W\]/,
    writes: 'out-rank',
  },
  {
    name: 'an image that is not an image',
    argv: async () => {
      const folder = join(dir, 'imgs', 'cat');
      mkdirSync(folder, { recursive: true });
      mkdirSync(join(dir, 'imgs', 'dog')); // two categories: a single one adds a notice line
      await sharp(Buffer.alloc(16 * 16 * 3, 90), { raw: { width: 16, height: 16, channels: 3 } }).png().toFile(join(folder, 'ok.png'));
      await sharp(Buffer.alloc(16 * 16 * 3, 20), { raw: { width: 16, height: 16, channels: 3 } }).png().toFile(join(dir, 'imgs', 'dog', 'ok.png'));
      writeFileSync(join(folder, 'fake.png'), 'GIF89a but really just text');
      return ['record', good.model, '--stimuli', join(dir, 'imgs'), '--out', join(dir, 'out-img')];
    },
    code: 2,
    message: /cannot decode image .*fake\.png/,
    writes: 'out-img',
  },
  {
    name: 'a zero-byte image',
    argv: () => {
      const folder = join(dir, 'imgs0', 'dog');
      mkdirSync(folder, { recursive: true });
      writeFileSync(join(folder, 'empty.jpg'), '');
      mkdirSync(join(dir, 'imgs0', 'cat')); // two categories: a single one adds a notice line
      writeFileSync(join(dir, 'imgs0', 'cat', 'empty.jpg'), '');
      return ['record', good.model, '--stimuli', join(dir, 'imgs0'), '--out', join(dir, 'out-img0')];
    },
    code: 2,
    message: /cannot decode image .*empty\.jpg/,
    writes: 'out-img0',
  },
  { name: 'CSV manifest with a wrong header', argv: () => (writeFileSync(join(dir, 'bad.csv'), 'file,class\na.png,cat\n'), ['record', good.model, '--stimuli', join(dir, 'bad.csv'), '--out', join(dir, 'out-csv')]), code: 2, message: /first line must be the header "path,label"/, writes: 'out-csv' },
  { name: 'CSV manifest naming a missing image', argv: () => (writeFileSync(join(dir, 'missing.csv'), 'path,label\nnot-here.png,cat\n'), ['record', good.model, '--stimuli', join(dir, 'missing.csv'), '--out', join(dir, 'out-csv2')]), code: 2, message: /not-here\.png does not exist/, writes: 'out-csv2' },
  { name: 'labels CSV of the wrong length', argv: () => (writeFileSync(join(dir, 'short.csv'), 'label\ncat\n'), ['record', good.model, '--stimuli', good.npy, '--labels', join(dir, 'short.csv'), '--out', join(dir, 'out-lab')]), code: 2, message: /has 1 rows but .* holds 6 stimuli/, writes: 'out-lab' },
  { name: 'stimuli of an unknown kind', argv: () => (writeFileSync(join(dir, 'list.txt'), 'a\n'), ['record', good.model, '--stimuli', join(dir, 'list.txt'), '--out', join(dir, 'out-txt')]), code: 2, message: /neither a folder, a \.csv manifest nor a \.npy array/, writes: 'out-txt' },
  { name: 'an empty stimulus folder', argv: () => (mkdirSync(join(dir, 'nothing'), { recursive: true }), ['record', good.model, '--stimuli', join(dir, 'nothing'), '--out', join(dir, 'out-empty')]), code: 2, message: /holds no images/, writes: 'out-empty' },

  // --- record options
  { name: '--batch 0', argv: () => record(good.model, join(dir, 'out-b0'), ['--batch', '0']), code: 2, message: /--batch.*not a positive integer/, writes: 'out-b0' },
  { name: '--shard beyond N', argv: () => record(good.model, join(dir, 'out-s1'), ['--shard', '5/4']), code: 2, message: /--shard 5\/4: K must be between 1 and N/, writes: 'out-s1' },
  { name: '--shard not K/N', argv: () => record(good.model, join(dir, 'out-s2'), ['--shard', 'half']), code: 2, message: /--shard must be K\/N/, writes: 'out-s2' },
  { name: '--shard with more shards than stimuli', argv: () => record(good.model, join(dir, 'out-s3'), ['--shard', '1/100']), code: 2, message: /6 items cannot be split into 100 non-empty shards/, writes: 'out-s3' },
  { name: '--checkpoint-every negative', argv: () => record(good.model, join(dir, 'out-cp'), ['--checkpoint-every', '-1']), code: 2, message: /--checkpoint-every must be a number of seconds ≥ 0/, writes: 'out-cp' },
  { name: '--out a folder that is not a snapshot', argv: () => (mkdirSync(join(dir, 'busy'), { recursive: true }), writeFileSync(join(dir, 'busy', 'notes.txt'), 'mine'), record(good.model, join(dir, 'busy'))), code: 2, message: /not empty and holds no snapshot/ },
  { name: '--resume with other options', argv: () => record(good.model, good.base, ['--resume', '--batch', '5']), code: 2, message: /--resume: .* was recorded with other --batch/ },
  { name: '--force absent on a complete snapshot', argv: () => record(good.model, good.base, ['--batch', '3']), code: 2, message: /already holds a complete snapshot/ },

  // --- modulation specs
  { name: 'spec with an unknown key', argv: () => record(good.model, join(dir, 'out-k'), ['--modulate', spec('unknown.yaml', 'site: relu1\nkind: uniform\ngain: 1.2\nstrenght: 3\n')]), code: 2, message: /unknown\.yaml: .*strenght/, writes: 'out-k' },
  { name: 'spec with a wrong type', argv: () => record(good.model, join(dir, 'out-t'), ['--modulate', spec('type.json', '{"site": "relu1", "kind": "uniform", "gain": "high"}')]), code: 2, message: /type\.json: gain must be a finite number, got "high"/, writes: 'out-t' },
  { name: 'spec with NaN', argv: () => record(good.model, join(dir, 'out-n'), ['--modulate', spec('nan.yaml', 'site: relu1\nkind: uniform\nstrength: .nan\n')]), code: 2, message: /nan\.yaml: strength must be a finite number, got NaN/, writes: 'out-n' },
  { name: 'zero-byte spec', argv: () => record(good.model, join(dir, 'out-z'), ['--modulate', spec('zero.yaml', '')]), code: 2, message: /zero\.yaml: .*empty/, writes: 'out-z' },
  { name: 'spec that is not YAML', argv: () => record(good.model, join(dir, 'out-y'), ['--modulate', spec('broken.yaml', 'site: [relu1\nkind: : :\n')]), code: 2, message: /broken\.yaml: not valid YAML/, writes: 'out-y' },
  { name: 'spec naming a site the model lacks', argv: () => record(good.model, join(dir, 'out-site'), ['--modulate', spec('site.yaml', 'site: relu9\nkind: uniform\ngain: 1.5\n')]), code: 2, message: /relu9/, writes: 'out-site' },
  { name: 'missing spec file', argv: () => record(good.model, join(dir, 'out-ms'), ['--modulate', join(dir, 'nope.yaml')]), code: 2, message: /nope\.yaml" not found/, writes: 'out-ms' },

  // --- snapshots and manifests
  { name: 'diff of a folder that is not a snapshot', argv: () => (mkdirSync(join(dir, 'plain'), { recursive: true }), ['diff', join(dir, 'plain'), good.mod]), code: 2, message: /is not a snapshot \(no manifest\.json\)/ },
  { name: 'manifest that is not JSON', argv: () => { const t = copyWithManifest('m-json', () => undefined); writeFileSync(join(t, 'manifest.json'), '{"format": 2,'); return ['diff', t, good.mod]; }, code: 2, message: /manifest\.json is not valid JSON/ },
  { name: 'unknown format version', argv: () => ['diff', copyWithManifest('m-version', (m) => (m.format = 99)), good.mod], code: 2, message: /has format 99; this Sonde reads formats 2 and 3/ },
  { name: 'manifest path escaping with ../', argv: () => ['diff', copyWithManifest('m-escape', (m) => (m.layers[0]!.file = '../../etc/passwd')), good.mod], code: 2, message: /layers\[0\]\.file "\.\.\/\.\.\/etc\/passwd" points outside the snapshot folder/ },
  { name: 'manifest absolute path', argv: () => ['tune', copyWithManifest('m-abs', (m) => (m.layers[1]!.file = '/etc/hostname')), '--out', join(dir, 't.arrow')], code: 2, message: /layers\[1\]\.file "\/etc\/hostname" is absolute/ },
  { name: 'manifest with an absurd shape', argv: () => ['diff', copyWithManifest('m-shape', (m) => (m.layers[0]!.shape = [100000, 100000, 1000])), good.mod], code: 2, message: /shape \[100000, 100000, 1000\] is absurdly large/ },
  { name: 'manifest with a negative dimension', argv: () => ['check', copyWithManifest('m-neg', (m) => (m.layers[0]!.shape = [4, -16, 16]))], code: 1, message: /layers\[0\]\.shape\[1\] must be above 0 \(got -16\)/ },
  { name: 'manifest with a duplicate layer', argv: () => ['diff', copyWithManifest('m-dup', (m) => m.layers.push({ ...m.layers[0]!, file: 'layers/other.arrow' })), good.mod], code: 2, message: /appears twice/ },
  { name: 'random bytes as a layer file', argv: () => ['diff', copyWithFile('f-random', firstLayer, (p) => randomBytes(p, 3000, 'arrow')), good.mod], code: 1, message: /is 3000 bytes, the manifest says \d+ \(truncated or changed after recording\).*sonde check/ },
  { name: 'truncated layer file', argv: () => ['diff', copyWithFile('f-cut', firstLayer, (p) => truncateSync(p, 700)), good.mod], code: 1, message: /is 700 bytes, the manifest says \d+ \(truncated or changed after recording\).*sonde check/ },
  { name: 'random bytes as stimuli.arrow', argv: () => ['tune', copyWithFile('f-stim', () => 'stimuli.arrow', (p) => randomBytes(p, 900, 'stim')), '--out', join(dir, 't2.arrow')], code: 2, message: /stimuli\.arrow is 900 bytes, the manifest says \d+ \(changed after recording\)/ },
  { name: 'zero-byte layer file under check', argv: () => ['check', copyWithFile('f-zero', firstLayer, (p) => writeFileSync(p, ''))], code: 1, message: /is 0 bytes, the manifest says \d+/ },
  { name: 'changed layer file under check', argv: () => ['check', copyWithFile('f-flip', firstLayer, (p) => { const b = readFileSync(p); b[b.length - 40] ^= 0xff; writeFileSync(p, b); })], code: 1, message: /SHA-256 differs from the manifest/ },
  { name: 'check of a missing folder', argv: () => ['check', join(dir, 'never')], code: 1, message: /never.*is not a folder/ },
  { name: 'incomplete snapshot', argv: () => ['diff', copyWithManifest('m-incomplete', (m) => (m.complete = false)), good.mod], code: 1, message: /is incomplete/ },
  { name: 'pair from another model', argv: () => ['diff', good.otherModelBase, good.mod], code: 2, message: /another model/ },
  { name: 'pair on other stimuli', argv: () => ['diff', good.otherStimuliBase, good.mod], code: 2, message: /other stimuli/ },
  { name: 'modulated run from a baseline of another model', argv: () => record(good.model, join(dir, 'out-pair'), ['--modulate', good.spec, '--from', good.otherModelBase]), code: 2, message: /different model/, writes: 'out-pair' },
  { name: 'tune of an unlabelled snapshot', argv: () => ['tune', good.unlabelled, '--out', join(dir, 't3.arrow')], code: 2, message: /has no labels/ },
  { name: 'diff --threshold not a number', argv: () => ['diff', good.base, good.mod, '--threshold', 'high'], code: 2, message: /--threshold must be a number, "best" or "auto"/ },
  { name: 'diff --shard without --partial', argv: () => ['diff', good.base, good.mod, '--shard', '1/2'], code: 2, message: /--shard needs --partial/ },
  { name: 'sense --step NaN', argv: () => ['sense', good.model, '--site', 'relu1', '--out', join(dir, 's2.arrow'), '--from', good.base, '--step', 'NaN'], code: 2, message: /--step "NaN" is not a positive number/ },

  // --- merge
  { name: 'merge of snapshots that are not shards', argv: () => ['merge', good.base, good.otherStimuliBase, '--out', join(dir, 'merged')], code: 2, message: /is not a shard snapshot/, writes: 'merged' },
  { name: 'merge of a JSON file that is not a partial', argv: () => (writeFileSync(join(dir, 'p.json'), '{"a": 1}'), ['merge', join(dir, 'p.json')]), code: 2, message: /is not a Sonde partial-statistics file/ },
  { name: 'merge of random bytes as a partial', argv: () => ['merge', randomBytes(join(dir, 'p2.json'), 200, 'partial')], code: 2, message: /p2\.json is not valid JSON/ },
  { name: 'merge of a folder and a file', argv: () => ['merge', good.base, join(dir, 'p.json'), '--out', join(dir, 'merged2')], code: 2, message: /all snapshot folders or all partial-statistics files/ },
  { name: 'report of a file that is not JSON', argv: () => ['report', good.npy, '--out', join(dir, 'r.html')], code: 2, message: /stimuli\.npy is not JSON/ },
];

beforeAll(async () => {
  dir = tempFolder('sonde-bad-');
  good.model = join(dir, 'net.onnx');
  writeFileSync(good.model, buildTinyNet({ bias: true, classes: 2 }));
  const other = join(dir, 'other.onnx');
  writeFileSync(other, buildTinyNet({ bias: true, classes: 2, seed: 77 }));
  const s = writeStimuliNpy(dir, [6, 3, 16, 16]);
  good.npy = s.npy;
  good.labels = s.labels;
  const otherStimuli = join(dir, 'other-stimuli');
  mkdirSync(otherStimuli);
  const s2 = writeStimuliNpy(otherStimuli, [6, 3, 16, 16], 99);
  good.base = (await recordSnapshot({ model: good.model, stimuli: good.npy, labels: good.labels, out: join(dir, 'base'), layers: 'all', batch: 4 })).folder;
  good.otherModelBase = (await recordSnapshot({ model: other, stimuli: good.npy, labels: good.labels, out: join(dir, 'base-other-model'), layers: 'all', batch: 4 })).folder;
  good.otherStimuliBase = (await recordSnapshot({ model: good.model, stimuli: s2.npy, labels: good.labels, out: join(dir, 'base-other-stimuli'), layers: 'all', batch: 4 })).folder;
  good.unlabelled = (await recordSnapshot({ model: good.model, stimuli: good.npy, labels: 'none', out: join(dir, 'base-unlabelled'), batch: 4 })).folder;
  good.spec = spec('good.yaml', 'site: relu1\nkind: uniform\ngain: 1.5\n');
  good.mod = (await recordModulated({ model: good.model, stimuli: good.npy, labels: good.labels, out: join(dir, 'mod'), modulate: good.spec, from: good.base })).folder;
}, 120_000);

describe('bad-input corpus', () => {
  it('has at least 40 cases', () => {
    expect(cases.length).toBeGreaterThanOrEqual(40);
  });

  it.each(cases.map((c) => [c.name, c] as const))('%s: one line, the right exit code, no stack, nothing marked complete', async (_name, c) => {
    const argv = await c.argv();
    if (c.writes) rmSync(join(dir, c.writes), { recursive: true, force: true });
    const result = await runSonde(argv);
    expect(result.code, result.stderr).toBe(c.code);
    const lines = result.stderr.trim().split('\n');
    expect(lines, result.stderr).toHaveLength(1);
    expect(lines[0]).toMatch(/^sonde: /);
    expect(result.stderr).toMatch(c.message);
    expect(result.stderr).not.toMatch(/\n\s+at |unexpected error/);
    if (c.writes && existsSync(join(dir, c.writes, 'manifest.json'))) {
      expect(JSON.parse(readFileSync(join(dir, c.writes, 'manifest.json'), 'utf8')).complete).toBe(false);
    }
  });

  it('--verbose adds the stack trace to a bad input\'s message', async () => {
    const result = await runSonde(['--verbose', 'layers', join(dir, 'zero.onnx')]);
    expect(result.code).toBe(2);
    expect(result.stderr.split('\n').length).toBeGreaterThan(2);
    expect(result.stderr).toMatch(/\n\s+at /);
  });
});
