/**
 * Overwrite safety: Sonde never deletes or overwrites what it did not write, never replaces an existing
 * output without --force, never writes over one of its own inputs, and a failed write leaves the previous
 * file as it was. Each case names the input, checks the exit code and the one-line message (path, what
 * was found, the fix), and compares every file that must survive byte for byte (SHA-256 of the whole
 * tree before and after). Inputs are invented robustness data; the expectations are the rules written
 * in src/outputs/output-folder.ts and src/outputs/output-file.ts (common practice for tools that
 * write into user folders: refuse rather than guess).
 */
import { createHash } from 'node:crypto';
import { existsSync, lstatSync, mkdirSync, readdirSync, readFileSync, rmSync, symlinkSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, beforeAll, describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { runDemo } from '../../src/demo/demo.js';
import { DEMO_MARK, prepareDemoFolder, prepareSweepFolder } from '../../src/outputs/output-folder.js';
import { injectWriteFault } from '../../src/snapshot/arrow-sink.js';
import { injectReplaceFault } from '../../src/disk/atomic-file.js';
import { readTuningTable } from '../../src/snapshot/tables.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
let base: string;
let mod: string;
let diffJson: string;

/** SHA-256 of every file below `folder` (links by their target text), by relative path. */
function treeDigest(folder: string): Record<string, string> {
  const out: Record<string, string> = {};
  const walk = (relative: string): void => {
    for (const name of readdirSync(join(folder, relative)).sort()) {
      const path = relative ? `${relative}/${name}` : name;
      const stat = lstatSync(join(folder, path));
      if (stat.isDirectory()) walk(path);
      else out[path] = stat.isSymbolicLink() ? `link` : createHash('sha256').update(readFileSync(join(folder, path))).digest('hex');
    }
  };
  walk('');
  return out;
}

/** A folder of user files that no Sonde command wrote. */
function userFolder(name: string, files: Record<string, string>): string {
  const folder = join(dir, name);
  for (const [path, text] of Object.entries(files)) {
    mkdirSync(join(folder, path, '..'), { recursive: true });
    writeFileSync(join(folder, path), text);
  }
  return folder;
}

/** Runs the CLI and checks a refusal: exit code, one line, no stack, the message pattern. */
async function expectRefusal(args: string[], code: 1 | 2, pattern: RegExp): Promise<string> {
  const result = await runSonde(args);
  expect(result.code, result.stderr).toBe(code);
  expect(result.stderr.trim().split('\n'), result.stderr).toHaveLength(1);
  expect(result.stderr).toMatch(pattern);
  expect(result.stderr).not.toMatch(/\n\s+at /);
  return result.stderr;
}

const record = (out: string, extra: string[] = []) => ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', out, '--layers', 'all', '--batch', '4', '--threads', '1', ...extra];

beforeAll(async () => {
  dir = tempFolder('sonde-overwrite-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true }));
  stimuli = writeStimuliNpy(dir, [12, 3, 16, 16], 7);
  base = join(dir, 'base');
  const recorded = await runSonde(record(base));
  expect(recorded.code, recorded.stderr).toBe(0);
  writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.25\n');
  mod = join(dir, 'mod');
  const modulated = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', mod, '--modulate', join(dir, 'spec.yaml'), '--from', base, '--batch', '4', '--threads', '1']);
  expect(modulated.code, modulated.stderr).toBe(0);
  const diffed = await runSonde(['diff', base, mod, '--bootstrap', '0', '--json']);
  expect(diffed.code, diffed.stderr).toBe(0);
  diffJson = join(dir, 'diff.json');
  writeFileSync(diffJson, diffed.stdout);
});

afterEach(() => {
  injectWriteFault(null);
  injectReplaceFault(null);
});

describe('output folders (record, merge, sweep, demo)', () => {
  it('record --out a folder holding only a foreign manifest.json and layers/ is refused, even with --force; every file survives', async () => {
    const folder = userFolder('webapp', { 'manifest.json': '{"name": "my app", "start_url": "/"}\n', 'layers/000-base.arrow': 'my own bytes', 'index.html': '<p>hi</p>' });
    const before = treeDigest(folder);
    for (const force of [[], ['--force']]) {
      await expectRefusal(record(folder, force), 2, /--out .*webapp is not empty and holds no snapshot \(a manifest\.json that Sonde did not write .*\).*choose a new or empty folder/);
      expect(treeDigest(folder)).toEqual(before);
    }
  });

  it('record --resume --out a folder with a foreign manifest.json is refused without writing a lock file into it', async () => {
    const folder = userFolder('webapp-resume', { 'manifest.json': '{"name": "my app"}\n' });
    const before = treeDigest(folder);
    await expectRefusal(record(folder, ['--resume']), 2, /--out .*webapp-resume is not empty and holds no snapshot \(a manifest\.json that Sonde did not write/);
    expect(treeDigest(folder)).toEqual(before);
  });

  it('record --out a complete snapshot whose manifest fails validation is refused without --force, and replaced with it', async () => {
    const folder = join(dir, 'damaged');
    expect((await runSonde(record(folder))).code).toBe(0);
    const manifestPath = join(folder, 'manifest.json');
    const manifest = JSON.parse(readFileSync(manifestPath, 'utf8')) as Record<string, unknown>;
    writeFileSync(manifestPath, JSON.stringify({ ...manifest, format: 999 }));
    const before = treeDigest(folder);
    await expectRefusal(record(folder), 2, /--out .*damaged holds a Sonde snapshot whose manifest fails validation .*format 999.*pass --force to replace it/);
    expect(treeDigest(folder)).toEqual(before);
    const forced = await runSonde(record(folder, ['--force']));
    expect(forced.code, forced.stderr).toBe(0);
    expect((JSON.parse(readFileSync(manifestPath, 'utf8')) as { complete: boolean }).complete).toBe(true);
  });

  it('record --force over a complete snapshot that also holds a user file is refused; the user file and the snapshot survive', async () => {
    const folder = join(dir, 'with-notes');
    expect((await runSonde(record(folder))).code).toBe(0);
    writeFileSync(join(folder, 'notes.txt'), 'results I wrote by hand\n');
    mkdirSync(join(folder, 'layers', 'mine'));
    writeFileSync(join(folder, 'layers', 'mine', 'x.bin'), 'x');
    const before = treeDigest(folder);
    await expectRefusal(record(folder, ['--force']), 2, /--out .*with-notes holds a Sonde snapshot and also entries Sonde did not write \(layers\/mine, notes\.txt\); refusing to replace it, even with --force.*move those entries out/);
    expect(treeDigest(folder)).toEqual(before);
  });

  it('record --out a complete snapshot without --force is refused (E_OUT_EXISTS); with --force it is replaced', async () => {
    const folder = join(dir, 'again');
    expect((await runSonde(record(folder))).code).toBe(0);
    const before = treeDigest(folder);
    await expectRefusal(record(folder), 2, /already holds a complete snapshot.*pass --force/);
    expect(treeDigest(folder)).toEqual(before);
    expect((await runSonde(record(folder, ['--force']))).code).toBe(0);
  });

  it('record --force deletes a layer file its manifest lists even under a name of another pattern', async () => {
    const folder = join(dir, 'renamed');
    expect((await runSonde(record(folder))).code).toBe(0);
    const manifestPath = join(folder, 'manifest.json');
    const manifest = JSON.parse(readFileSync(manifestPath, 'utf8')) as { layers: Array<{ file: string }> };
    const old = manifest.layers[0]!.file;
    writeFileSync(join(folder, 'layers', 'custom name.arrow'), readFileSync(join(folder, old)));
    rmSync(join(folder, old));
    manifest.layers[0]!.file = 'layers/custom name.arrow';
    writeFileSync(manifestPath, JSON.stringify(manifest));
    const forced = await runSonde(record(folder, ['--force']));
    expect(forced.code, forced.stderr).toBe(0);
    expect(existsSync(join(folder, 'layers', 'custom name.arrow'))).toBe(false);
    expect(existsSync(join(folder, old))).toBe(true);
  });

  it('merge --out a folder that is not a snapshot is refused with --force, and nothing is written into it', async () => {
    const shards = [1, 2].map((k) => join(dir, `shard-${k}`));
    for (const [i, shard] of shards.entries()) expect((await runSonde(record(shard, ['--shard', `${i + 1}/2`]))).code).toBe(0);
    const folder = userFolder('merge-target', { 'manifest.json': 'not json at all', 'readme.md': '# mine\n' });
    const before = treeDigest(folder);
    await expectRefusal(['merge', ...shards, '--out', folder, '--force'], 2, /merge-target is not empty and holds no snapshot/);
    expect(treeDigest(folder)).toEqual(before);
  });

  it('prepareSweepFolder(folder) refuses a folder holding anything but a sweep\'s files, and accepts an earlier sweep', () => {
    const foreign = userFolder('sweep-foreign', { 'sweep.json': '{}', 'photo.jpg': 'jpeg' });
    const before = treeDigest(foreign);
    expect(() => prepareSweepFolder(foreign)).toThrow(/sweep-foreign is not empty and is not a sweep folder \(found photo\.jpg\)/);
    expect(treeDigest(foreign)).toEqual(before);
    const earlier = userFolder('sweep-earlier', { 'cells.jsonl': '', 'sweep.json': '{}', 'cells.arrow': '' });
    const lock = prepareSweepFolder(earlier); // and locks it while the sweep runs
    expect(Object.keys(treeDigest(earlier))).toEqual(['.lock', 'cells.arrow', 'cells.jsonl', 'sweep.json']);
    lock.release();
    expect(Object.keys(treeDigest(earlier))).toEqual(['cells.arrow', 'cells.jsonl', 'sweep.json']);
  });

  it('runDemo({ out }) refuses a non-empty folder the demo did not write; every file survives', async () => {
    const folder = userFolder('holiday', { 'photo.jpg': 'jpeg bytes', 'sub/diary.txt': 'day 1' });
    const before = treeDigest(folder);
    const error = await runDemo({ out: folder, quick: true }).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(UsageError);
    expect((error as UsageError).code).toBe('E_OUT');
    expect((error as UsageError).message).toMatch(/holiday is not empty and was not written by sonde demo \(it has no \.sonde-demo\.json; found photo\.jpg, sub\/diary\.txt\)/);
    expect((error as UsageError).hint).toMatch(/choose a new or empty folder/);
    expect(treeDigest(folder)).toEqual(before);
  });

  it('runDemo({ out }) lists every file it wrote: its folder is refused once a user file is added, and otherwise emptied for the next run', async () => {
    const folder = join(dir, 'demo-real');
    await runDemo({ out: folder, quick: true, threads: 1 });
    const mark = JSON.parse(readFileSync(join(folder, DEMO_MARK), 'utf8')) as { complete: boolean; files: string[] };
    expect(mark.complete).toBe(true);
    expect(mark.files).toEqual(Object.keys(treeDigest(folder)).filter((f) => f !== DEMO_MARK));
    writeFileSync(join(folder, 'sweep', 'my-notes.txt'), 'mine');
    const before = treeDigest(folder);
    await expect(runDemo({ out: folder, quick: true, threads: 1 })).rejects.toThrow(/demo-real holds files the demo did not write \(sweep\/my-notes\.txt\)/);
    expect(treeDigest(folder)).toEqual(before);
    rmSync(join(folder, 'sweep', 'my-notes.txt'));
    prepareDemoFolder(folder); // what the next run does first
    expect(readdirSync(folder)).toEqual([DEMO_MARK]);
  }, 120_000);

  it('prepareDemoFolder(folder) empties a finished demo folder of exactly its listed files, and refuses one with a file added later', () => {
    const folder = join(dir, 'demo-own');
    const first = prepareDemoFolder(folder);
    userFolder('demo-own', { 'report.html': '<html>', 'baseline/manifest.json': '{}', 'baseline/layers/000-a.arrow': 'a' });
    first.settle(true);
    writeFileSync(join(folder, 'baseline', 'layers', 'mine.txt'), 'added by the user');
    const before = treeDigest(folder);
    expect(() => prepareDemoFolder(folder)).toThrow(/demo-own holds files the demo did not write \(baseline\/layers\/mine\.txt\)/);
    expect(treeDigest(folder)).toEqual(before);
    rmSync(join(folder, 'baseline', 'layers', 'mine.txt'));
    prepareDemoFolder(folder);
    expect(readdirSync(folder)).toEqual([DEMO_MARK]);
  });

  it('prepareDemoFolder(folder) after an interrupted demo also deletes what the unfinished step created, but not files added to finished steps', () => {
    const folder = join(dir, 'demo-cut');
    const run = prepareDemoFolder(folder);
    userFolder('demo-cut', { 'stimuli/stimuli.npy': 'n' });
    run.settle(false); // the next step starts
    userFolder('demo-cut', { 'baseline/manifest.json': '{}', 'baseline/layers/000-a.arrow.partial': 'half' }); // killed here
    writeFileSync(join(folder, 'stimuli', 'extra.csv'), 'mine');
    expect(() => prepareDemoFolder(folder)).toThrow(/holds files the demo did not write \(stimuli\/extra\.csv\)/);
    rmSync(join(folder, 'stimuli', 'extra.csv'));
    prepareDemoFolder(folder);
    expect(readdirSync(folder)).toEqual([DEMO_MARK]);
  });
});

describe('output files (tune, sense, diff --csv, report, merge partials)', () => {
  it('tune --out an existing file is refused without --force (the file survives) and replaced with it', async () => {
    const table = join(dir, 'existing-tuning.arrow');
    writeFileSync(table, 'an older table I want to keep');
    await expectRefusal(['tune', base, '--out', table], 2, /--out .*existing-tuning\.arrow already exists \(29 bytes\); refusing to overwrite it \(pass --force to replace it/);
    expect(readFileSync(table, 'utf8')).toBe('an older table I want to keep');
    const forced = await runSonde(['tune', base, '--out', table, '--force']);
    expect(forced.code, forced.stderr).toBe(0);
    expect(readTuningTable(table).blocks.length).toBeGreaterThan(0);
  });

  it('tune --out --force on a full disk exits 1 and leaves the previous file byte for byte, with no temporary file', async () => {
    const table = join(dir, 'kept-tuning.arrow');
    expect((await runSonde(['tune', base, '--out', table])).code).toBe(0);
    const before = readFileSync(table);
    injectWriteFault((_path, offset) => (offset > 0 ? Object.assign(new Error('ENOSPC: no space left on device, write'), { code: 'ENOSPC' }) : null));
    // the temporary file has a name of this writer's own (PATH.<pid>-<8 hex>.partial)
    await expectRefusal(['tune', base, '--out', table, '--force'], 1, /cannot write .*kept-tuning\.arrow\.\d+-[0-9a-f]{8}\.partial: the disk is full/);
    injectWriteFault(null);
    expect(readFileSync(table).equals(before)).toBe(true);
    expect(readdirSync(dir).filter((name) => name.startsWith('kept-tuning.arrow.') && name.endsWith('.partial'))).toEqual([]);
  });

  it('tune --out a folder is refused', async () => {
    const folder = userFolder('a-folder', { 'x.txt': 'x' });
    await expectRefusal(['tune', base, '--out', folder, '--force'], 2, /--out .*a-folder is a folder, not a file/);
    expect(treeDigest(folder)).toEqual({ 'x.txt': createHash('sha256').update('x').digest('hex') });
  });

  it('sense --out an existing file is refused before any run', async () => {
    const table = join(dir, 'existing-sens.arrow');
    writeFileSync(table, 'keep me');
    await expectRefusal(['sense', model, '--from', base, '--site', 'relu1', '--out', table], 2, /existing-sens\.arrow already exists \(7 bytes\).*pass --force/);
    expect(readFileSync(table, 'utf8')).toBe('keep me');
  });

  it('diff --csv an existing file is refused without --force, replaced with it, and a failed write keeps the old file', async () => {
    const csv = join(dir, 'layers.csv');
    writeFileSync(csv, 'my,own\n1,2\n');
    await expectRefusal(['diff', base, mod, '--bootstrap', '0', '--csv', csv], 2, /--csv .*layers\.csv already exists \(11 bytes\); refusing to overwrite it \(pass --force/);
    expect(readFileSync(csv, 'utf8')).toBe('my,own\n1,2\n');
    injectReplaceFault(() => Object.assign(new Error('ENOSPC: no space left on device, write'), { code: 'ENOSPC' }));
    await expectRefusal(['diff', base, mod, '--bootstrap', '0', '--csv', csv, '--force'], 1, /cannot write .*layers\.csv: the disk is full/);
    injectReplaceFault(null);
    expect(readFileSync(csv, 'utf8')).toBe('my,own\n1,2\n');
    expect(existsSync(`${csv}.partial`)).toBe(false);
    const forced = await runSonde(['diff', base, mod, '--bootstrap', '0', '--csv', csv, '--force']);
    expect(forced.code, forced.stderr).toBe(0);
    expect(readFileSync(csv, 'utf8').split('\n')[0]).toMatch(/layer/);
  });

  it('report --out an existing file is refused without --force; a failed write keeps the old report', async () => {
    const html = join(dir, 'report.html');
    writeFileSync(html, '<p>older report</p>');
    await expectRefusal(['report', diffJson, '--out', html], 2, /--out .*report\.html already exists \(19 bytes\).*pass --force/);
    injectReplaceFault(() => Object.assign(new Error('ENOSPC: no space left on device, write'), { code: 'ENOSPC' }));
    await expectRefusal(['report', diffJson, '--out', html, '--force'], 1, /cannot write .*report\.html \(ENOSPC\)/);
    injectReplaceFault(null);
    expect(readFileSync(html, 'utf8')).toBe('<p>older report</p>');
    expect(existsSync(`${html}.partial`)).toBe(false);
    expect((await runSonde(['report', diffJson, '--out', html, '--force'])).code).toBe(0);
    expect(readFileSync(html, 'utf8')).toMatch(/^<!doctype html>/i);
  });

  it('merge PARTIALS --out an existing table is refused without --force', async () => {
    const parts = [1, 2].map((k) => join(dir, `tune-part-${k}.json`));
    for (const [i, part] of parts.entries()) expect((await runSonde(['tune', base, '--shard', `${i + 1}/2`, '--partial', part])).code).toBe(0);
    const table = join(dir, 'merged-tuning.arrow');
    writeFileSync(table, 'older');
    await expectRefusal(['merge', ...parts, '--out', table], 2, /merged-tuning\.arrow already exists \(5 bytes\).*pass --force/);
    expect(readFileSync(table, 'utf8')).toBe('older');
    expect((await runSonde(['merge', ...parts, '--out', table, '--force'])).code).toBe(0);
  });
});

describe('outputs that are inputs', () => {
  it('record --from X --out X --force is refused before anything is touched', async () => {
    const before = treeDigest(base);
    await expectRefusal(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', base, '--modulate', join(dir, 'spec.yaml'), '--from', base, '--force'], 2, /--out .*base is --from .*base itself .*writing it would destroy the input \(choose another --out\)/);
    expect(treeDigest(base)).toEqual(before);
  });

  it('record --out LINK --force, LINK a symbolic link to the --from baseline, is refused', async () => {
    const link = join(dir, 'base-link');
    symlinkSync(base, link);
    const before = treeDigest(base);
    await expectRefusal(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', link, '--modulate', join(dir, 'spec.yaml'), '--from', base, '--force'], 2, /--out .*base-link is --from .* itself \(both are .*base\)/);
    expect(treeDigest(base)).toEqual(before);
  });

  it('record --out a folder that contains the stimuli is refused', async () => {
    const folder = join(dir, 'stimuli-home');
    mkdirSync(folder);
    const local = writeStimuliNpy(folder, [4, 3, 16, 16], 9);
    const before = treeDigest(folder);
    await expectRefusal(['record', model, '--stimuli', local.npy, '--out', folder, '--force'], 2, /--stimuli .*stimuli\.npy lies inside --out .*stimuli-home.*could delete it/);
    expect(treeDigest(folder)).toEqual(before);
  });

  it('tune SNAPSHOT --out a file inside SNAPSHOT --force is refused', async () => {
    const before = treeDigest(base);
    await expectRefusal(['tune', base, '--out', join(base, 'layers', 'tuning.arrow'), '--force'], 2, /--out .*tuning\.arrow lies inside SNAPSHOT .*base.*writing there would change that input/);
    expect(treeDigest(base)).toEqual(before);
  });

  it('sweep --from X --out X is refused before any cell is written', async () => {
    const before = treeDigest(base);
    await expectRefusal(['sweep', model, '--from', base, '--sites', 'relu1', '--schemes', 'uniform', '--strengths', '0,0.5', '--task', 'detect:all', '--out', base, '--threads', '1'], 2, /--out .*base is --from .*base itself/);
    expect(treeDigest(base)).toEqual(before);
  });

  it('diff --csv a file inside BASE --force is refused before the diff runs', async () => {
    const before = treeDigest(base);
    await expectRefusal(['diff', base, mod, '--bootstrap', '0', '--csv', join(base, 'manifest.json'), '--force'], 2, /--csv .*manifest\.json lies inside BASE .*base/);
    expect(treeDigest(base)).toEqual(before);
  });

  it('report INPUT --out INPUT --force is refused; the input survives', async () => {
    const before = readFileSync(diffJson);
    await expectRefusal(['report', diffJson, '--out', diffJson, '--force'], 2, /--out .*diff\.json is input 1 .*diff\.json itself/);
    expect(readFileSync(diffJson).equals(before)).toBe(true);
  });

  it('merge SHARD... --out SHARD --force is refused', async () => {
    const shard = join(dir, 'shard-1');
    if (!existsSync(shard)) expect((await runSonde(record(shard, ['--shard', '1/2']))).code).toBe(0);
    const other = join(dir, 'shard-2');
    if (!existsSync(other)) expect((await runSonde(record(other, ['--shard', '2/2']))).code).toBe(0);
    const before = treeDigest(shard);
    await expectRefusal(['merge', shard, other, '--out', shard, '--force'], 2, /--out .*shard-1 is part 1 .*shard-1 itself/);
    expect(treeDigest(shard)).toEqual(before);
  });
});
