/**
 * Hostile files around Sonde's own: a user's file inside a snapshot folder that only looks like a layer
 * file, links planted at temporary names, two writers of one output file, FIFOs and devices where Sonde
 * reads a whole file, and a partial-statistics file with one character flipped. Each expectation is an
 * exact property of the file system (a byte-identical file, a link left untouched, a FIFO never
 * opened for a blocking read) or of SHA-256 (a changed character changes the digest).
 */
import { execFileSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { existsSync, lstatSync, mkdirSync, readdirSync, readFileSync, readlinkSync, symlinkSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readInputFile } from '../../src/disk/input-file.js';
import { readTuningTable } from '../../src/snapshot/tables.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, runSondeProcess } from './cli-process.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
let base: string;
let mod: string;

const sha = (path: string) => createHash('sha256').update(readFileSync(path)).digest('hex');

beforeAll(async () => {
  dir = tempFolder('sonde-hostile-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2 }));
  stimuli = writeStimuliNpy(dir, [8, 3, 16, 16]);
  base = join(dir, 'base');
  expect((await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', base, '--layers', 'all', '--batch', '4'])).code).toBe(0);
  writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.4\n');
  mod = join(dir, 'mod');
  const modded = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', mod, '--modulate', join(dir, 'spec.yaml'), '--from', base]);
  expect(modded.code, modded.stderr).toBe(0);
}, 60_000);

describe('files in a snapshot folder that the manifest does not list', () => {
  it('record --out X --force refuses a folder holding a user\'s layers/900-my-export.arrow and leaves it', async () => {
    const folder = join(dir, 'with-export');
    expect((await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4'])).code).toBe(0);
    const mine = join(folder, 'layers', '900-my-export.arrow');
    writeFileSync(mine, 'my own export');
    const forced = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4', '--force']);
    expect(forced.code).toBe(2);
    expect(forced.stderr).toMatch(/entries Sonde did not write \(layers\/900-my-export\.arrow\)/);
    expect(readFileSync(mine, 'utf8')).toBe('my own export');
  });

  it('an incomplete snapshot (no --force needed) holding a user\'s layer-like file is refused, the file kept', async () => {
    const folder = join(dir, 'incomplete-export');
    expect((await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4'])).code).toBe(0);
    const path = join(folder, 'manifest.json');
    writeFileSync(path, readFileSync(path, 'utf8').replace('"complete": true', '"complete": false'));
    const mine = join(folder, 'layers', '950-relu9.arrow.partial'); // Sonde's naming pattern, but not listed
    writeFileSync(mine, 'looks like a temporary, is mine');
    const again = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4']);
    expect(again.code).toBe(2);
    expect(readFileSync(mine, 'utf8')).toBe('looks like a temporary, is mine');
  });
});

describe('links planted at temporary names', () => {
  const cases: Array<[string, (out: string) => string[]]> = [
    ['report --out', (out) => ['report', join(dir, 'diff.json'), '--out', out]],
    ['tune --out', (out) => ['tune', base, '--out', out]],
    ['diff --csv', (out) => ['diff', base, mod, '--csv', out]],
  ];
  for (const [name, args] of cases) {
    it(`${name} R with a link R.partial → victim writes R, never the victim, and leaves the link alone`, async () => {
      if (name === 'report --out' && !existsSync(join(dir, 'diff.json'))) {
        const diff = await runSonde(['diff', base, mod, '--json']);
        writeFileSync(join(dir, 'diff.json'), diff.stdout);
      }
      const folder = join(dir, name.replace(/\W+/g, '-'));
      mkdirSync(folder);
      const victim = join(folder, 'victim');
      writeFileSync(victim, 'precious');
      const out = join(folder, 'R');
      symlinkSync(victim, `${out}.partial`);
      const result = await runSonde(args(out));
      expect(result.code, result.stderr).toBe(0);
      expect(readFileSync(victim, 'utf8')).toBe('precious');
      expect(lstatSync(out).isFile()).toBe(true);
      expect(lstatSync(out).isSymbolicLink()).toBe(false);
      expect(readlinkSync(`${out}.partial`)).toBe(victim);
      expect(readdirSync(folder).sort()).toEqual(['R', 'R.partial', 'victim']);
    });
  }

  it('a link at a layer file\'s temporary name inside the snapshot folder is removed, never followed', async () => {
    const folder = join(dir, 'planted-layer');
    expect((await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4'])).code).toBe(0);
    const manifest = JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as { layers: Array<{ file: string }> };
    const victim = join(dir, 'layer-victim');
    writeFileSync(victim, 'precious');
    symlinkSync(victim, join(folder, `${manifest.layers[0]!.file}.partial`));
    const forced = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4', '--force']);
    // the link is not Sonde's file (a link, not a regular file): the folder is refused and nothing followed
    expect(forced.code).toBe(2);
    expect(readFileSync(victim, 'utf8')).toBe('precious');
  });
});

describe('two writers of one output file', () => {
  it('two tune --out T --force at once each write whole files: T is a complete table and no temporary is left', async () => {
    ensureBuilt();
    const out = join(dir, 'raced.arrow');
    writeFileSync(out, 'old');
    const runs = await Promise.all([1, 2, 3].map(() => runSondeProcess(['tune', base, '--out', out, '--force'])));
    for (const r of runs) expect(r.code, r.stderr).toBe(0);
    expect(readTuningTable(out).blocks.length).toBeGreaterThan(0);
    expect(readdirSync(dir).filter((n) => n.startsWith('raced.arrow.'))).toEqual([]);
    const single = join(dir, 'single.arrow');
    expect((await runSonde(['tune', base, '--out', single])).code).toBe(0);
    expect(sha(out)).toBe(sha(single));
  }, 120_000);
});

describe('inputs that never end or explode', () => {
  it('readInputFile refuses a FIFO at once (no writer needed) and /dev/zero by what it is', () => {
    const fifo = join(dir, 'pipe');
    execFileSync('mkfifo', [fifo]);
    expect(() => readInputFile(fifo, 'spec pipe', 1024)).toThrow(/spec pipe is a FIFO \(named pipe\), not a regular file/);
    expect(() => readInputFile('/dev/zero', 'values /dev/zero', 1024)).toThrow(/is a character device, not a regular file/);
  });

  it('readInputFile refuses a file over its kind\'s limit before reading it', () => {
    const big = join(dir, 'big.json');
    writeFileSync(big, Buffer.alloc(4096, 0x20));
    expect(() => readInputFile(big, 'sidecar big.json', 1024)).toThrow(/sidecar big\.json is 4096 bytes, more than the 1024 bytes Sonde reads/);
    expect(readInputFile(big, 'ok', 4096).length).toBe(4096);
  });

  it('/dev/zero as modulation spec, sidecar-free report input, --labels or merge partial: one line, exit 2, nothing read', async () => {
    const commands: string[][] = [
      ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'z1'), '--modulate', '/dev/zero', '--from', base],
      ['report', '/dev/zero', '--out', join(dir, 'z.html')],
      ['record', model, '--stimuli', stimuli.npy, '--labels', '/dev/zero', '--out', join(dir, 'z2')],
      ['merge', '/dev/zero'],
    ];
    for (const args of commands) {
      const result = await runSonde(args);
      expect(result.code, `${args.join(' ')}: ${result.stderr}`).toBe(2);
      expect(result.stderr.trim().split('\n'), result.stderr).toHaveLength(1);
      expect(result.stderr).toMatch(/character device|not a regular file|not a partial-statistics file/);
    }
  }, 60_000);

  it('a FIFO as modulation spec, values file, --tuning, sidecar, report input or merge partial: one line, exit 2, no hang', async () => {
    const fifo = join(dir, 'never.fifo');
    if (!existsSync(fifo)) execFileSync('mkfifo', [fifo]);
    const valuesSpec = join(dir, 'values-spec.yaml');
    writeFileSync(valuesSpec, `site: relu1\nkind: gain\nvalues: ${join(dir, 'never.npy')}\n`);
    if (!existsSync(join(dir, 'never.npy'))) execFileSync('mkfifo', [join(dir, 'never.npy')]);
    const sidecarModel = join(dir, 'sidecar-fifo.onnx');
    writeFileSync(sidecarModel, buildTinyNet({ bias: true, classes: 2 }));
    execFileSync('mkfifo', [join(dir, 'sidecar-fifo.json')]);
    const commands: string[][] = [
      ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'm1'), '--modulate', fifo, '--from', base],
      ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'm2'), '--modulate', valuesSpec, '--from', base],
      ['sweep', model, '--from', base, '--sites', 'relu1', '--tuning', fifo, '--strengths', '0:1:0.5', '--task', 'labels', '--out', join(dir, 'sw')],
      ['record', sidecarModel, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'm3')],
      ['report', fifo, '--out', join(dir, 'r.html')],
      ['merge', fifo],
    ];
    for (const args of commands) {
      const result = await runSonde(args);
      expect(result.code, `${args.join(' ')}: ${result.stderr}`).toBe(2);
      expect(result.stderr.trim().split('\n'), result.stderr).toHaveLength(1);
      expect(result.stderr).toMatch(/FIFO|not a regular file|not a partial-statistics file|folder|snapshot/);
    }
  }, 120_000);
});

describe('FIFOs planted inside output folders', () => {
  it('record --out a folder whose manifest.json, progress.json or .lock is a FIFO answers at once (refused, or the stale lock taken over), never hangs', async () => {
    for (const name of ['manifest.json', 'progress.json']) {
      const folder = join(dir, `fifo-${name}`);
      mkdirSync(folder);
      execFileSync('mkfifo', [join(folder, name)]);
      const result = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', folder, '--batch', '4', '--force']);
      expect(result.code, result.stderr).toBe(2);
      expect(result.stderr).toMatch(new RegExp(`${name.replace('.', '\\.')}`));
    }
    const { checkSnapshot } = await import('../../src/snapshot/check.js');
    const locked = join(dir, 'fifo-lock');
    expect((await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', locked, '--batch', '4'])).code).toBe(0);
    execFileSync('mkfifo', [join(locked, '.lock')]);
    const report = await checkSnapshot(locked); // reads the lock owner: a FIFO is no owner
    expect(report.ok).toBe(true);
  }, 60_000);
});

describe('partial statistics with a digest', () => {
  it('merge refuses a diff partial with one base64 character of its scores flipped, and merges the intact parts', async () => {
    const parts = [1, 2].map((k) => join(dir, `diff-${k}.json`));
    for (const [i, part] of parts.entries()) {
      const r = await runSonde(['diff', base, mod, '--task', 'labels', '--threshold', 'best', '--shard', `${i + 1}/2`, '--partial', part]);
      expect(r.code, r.stderr).toBe(0);
    }
    const intact = await runSonde(['merge', ...parts, '--json']);
    expect(intact.code, intact.stderr).toBe(0);
    const text = readFileSync(parts[1]!, 'utf8');
    const at = text.indexOf('"base64":"') + 12;
    const flipped = text.slice(0, at) + (text[at] === 'A' ? 'B' : 'A') + text.slice(at + 1);
    writeFileSync(parts[1]!, flipped);
    const damaged = await runSonde(['merge', ...parts, '--json']);
    expect(damaged.code).toBe(2);
    expect(damaged.stdout).toBe('');
    expect(damaged.stderr).toMatch(/diff-2\.json: its content does not match its sha256/);
    // a changed number outside the arrays, and a removed digest, are refused too
    writeFileSync(parts[1]!, text.replace(/"total":(\d+)/, (_m, n: string) => `"total":${Number(n) + 1}`));
    expect((await runSonde(['merge', ...parts, '--json'])).stderr).toMatch(/does not match its sha256/);
    writeFileSync(parts[1]!, text.replace(/,"sha256":"[0-9a-f]{64}"/, ''));
    expect((await runSonde(['merge', ...parts, '--json'])).stderr).toMatch(/sha256 must be a string \(missing\)/);
  }, 60_000);

  it('merge refuses a tune partial with a flipped character in its key, and one of an older version without a digest', async () => {
    const parts = [1, 2].map((k) => join(dir, `tune-${k}.json`));
    for (const [i, part] of parts.entries()) expect((await runSonde(['tune', base, '--shard', `${i + 1}/2`, '--partial', part])).code).toBe(0);
    expect((await runSonde(['merge', ...parts, '--out', join(dir, 'merged-tuning.arrow')])).code).toBe(0);
    const text = readFileSync(parts[0]!, 'utf8');
    const at = text.indexOf('"key":') + 10;
    writeFileSync(parts[0]!, text.slice(0, at) + (text[at] === 'a' ? 'b' : 'a') + text.slice(at + 1));
    const flipped = await runSonde(['merge', ...parts, '--out', join(dir, 'merged-tuning-2.arrow')]);
    expect(flipped.code).toBe(2);
    expect(flipped.stderr).toMatch(/(does not match its sha256|not valid JSON)/);
    writeFileSync(parts[0]!, text.replace('"version":2', '"version":1'));
    expect((await runSonde(['merge', ...parts, '--out', join(dir, 'merged-tuning-3.arrow')])).stderr).toMatch(/has partial-statistics version 1; this Sonde reads 2 \(write the parts again/);
  }, 60_000);
});
