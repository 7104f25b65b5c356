/**
 * Damaged stimulus tables: every reader (diff, tune, sense, sweep — all through openSnapshot) verifies
 * `stimuli.arrow` against the manifest before a label is used, as layer files are. The expectations
 * are exact properties: a changed byte changes a SHA-256; ids and labels are covered by the listing
 * digest, the per-stimulus input digests by the stimuli digest, so another snapshot's table of the same
 * length fails them.
 */
import { execFileSync } from 'node:child_process';
import { cpSync, mkdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let base: string;
let other: string;
let shard: string;

/** Replaces the first occurrence of `from` by `to` (same length) in a file's bytes, in place. */
function patchBytes(path: string, from: string, to: string): void {
  const bytes = readFileSync(path);
  const at = bytes.indexOf(Buffer.from(from));
  expect(at).toBeGreaterThan(0);
  Buffer.from(to).copy(bytes, at);
  writeFileSync(path, bytes);
}

function copy(name: string, from = base): string {
  const target = join(dir, name);
  cpSync(from, target, { recursive: true });
  return target;
}

beforeAll(async () => {
  dir = tempFolder('sonde-stimtable-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2 }));
  const sa = writeStimuliNpy(dir, [9, 3, 16, 16], 3, ['cat', 'dog', 'cat', 'dog', 'cat', 'dog', 'cat', 'dog', 'cat']);
  base = (await recordSnapshot({ model, stimuli: sa.npy, labels: sa.labels, out: join(dir, 'base'), layers: 'all', batch: 4 })).folder;
  shard = (await recordSnapshot({ model, stimuli: sa.npy, labels: sa.labels, out: join(dir, 'shard'), layers: 'all', batch: 4, shard: { index: 1, count: 2 } })).folder;
  // another recording of the same length on other pixels and the same labels
  mkdirSync(join(dir, 'o'));
  const sb = writeStimuliNpy(join(dir, 'o'), [9, 3, 16, 16], 4, ['cat', 'dog', 'cat', 'dog', 'cat', 'dog', 'cat', 'dog', 'cat']);
  other = (await recordSnapshot({ model, stimuli: sb.npy, labels: sb.labels, out: join(dir, 'other'), layers: 'all', batch: 4 })).folder;
  writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.4\n');
}, 60_000);

describe('stimulus table integrity', () => {
  it('openSnapshot(intact snapshot) reads the labels it recorded, and the manifest records the table hash', () => {
    const snapshot = openSnapshot(base);
    expect(snapshot.stimuli.labels.map((l) => l.join(';'))).toEqual(['cat', 'dog', 'cat', 'dog', 'cat', 'dog', 'cat', 'dog', 'cat']);
    expect(snapshot.manifest.stimuli.table?.sha256).toMatch(/^[0-9a-f]{64}$/);
  });

  it('one label changed in place (same size, valid Arrow) stops diff and tune before any result; check names it', async () => {
    const folder = copy('relabelled');
    const mod = (await recordModulated({ model, stimuli: join(dir, 'stimuli.npy'), out: join(dir, 'relabelled-mod'), modulate: join(dir, 'spec.yaml'), from: folder })).folder;
    patchBytes(join(folder, 'stimuli.arrow'), 'dog', 'cat');
    const diff = await runSonde(['diff', folder, mod, '--task', 'labels', '--threshold', 'best', '--json']);
    expect(diff.code).toBe(2);
    expect(diff.stdout).toBe('');
    expect(diff.stderr).toMatch(/stimuli\.arrow does not match the SHA-256 in the manifest/);
    expect(diff.stderr.trim().split('\n')).toHaveLength(1);
    const tune = await runSonde(['tune', folder, '--out', join(dir, 'relabelled.arrow')]);
    expect(tune.code).toBe(2);
    expect(tune.stderr).toMatch(/stimuli\.arrow/);
    const report = await checkSnapshot(folder);
    expect(report.ok).toBe(false);
    expect(report.problems.map((p) => `${p.subject}: ${p.message}`).join('\n')).toMatch(/stimuli\.arrow: does not match the SHA-256/);
  }, 60_000);

  it('another snapshot\'s stimuli.arrow of the same length is refused (per-stimulus digests differ)', async () => {
    const folder = copy('swapped-table');
    cpSync(join(other, 'stimuli.arrow'), join(folder, 'stimuli.arrow'));
    expect(() => openSnapshot(folder)).toThrow(/stimuli\.arrow (is \d+ bytes|does not match)/);
    // without the table hash (a manifest of an older build) the stimuli digest still catches it
    const path = join(folder, 'manifest.json');
    const m = JSON.parse(readFileSync(path, 'utf8')) as { stimuli: Record<string, unknown> };
    delete m.stimuli['table'];
    writeFileSync(path, JSON.stringify(m));
    expect(() => openSnapshot(folder)).toThrow(/per-stimulus digests do not give the stimuli digest/);
    const tune = await runSonde(['tune', folder, '--out', join(dir, 'swapped.arrow')]);
    expect(tune.code).toBe(2);
  });

  it('without the table hash, a changed label is caught by the listing digest, a changed index by the order check', () => {
    const folder = copy('old-relabelled');
    const path = join(folder, 'manifest.json');
    const m = JSON.parse(readFileSync(path, 'utf8')) as { stimuli: Record<string, unknown> };
    delete m.stimuli['table'];
    writeFileSync(path, JSON.stringify(m));
    expect(openSnapshot(folder).stimuli.ids).toHaveLength(9); // the older form still opens when intact
    patchBytes(join(folder, 'stimuli.arrow'), 'dog', 'cat');
    expect(() => openSnapshot(folder)).toThrow(/ids and labels do not match the listing digest/);
  });

  it('a shard snapshot (whose listing digest covers the whole listing) still refuses a changed label, by the table hash', () => {
    const folder = copy('shard-relabelled', shard);
    expect(openSnapshot(folder).stimuli.ids).toHaveLength(4);
    patchBytes(join(folder, 'stimuli.arrow'), 'dog', 'cat');
    expect(() => openSnapshot(folder)).toThrow(/stimuli\.arrow does not match the SHA-256/);
  });

  it('a stimuli.arrow that is a FIFO or missing is refused with one line, never opened', async () => {
    const folder = copy('missing-table');
    rmSync(join(folder, 'stimuli.arrow'));
    const missing = await runSonde(['tune', folder, '--out', join(dir, 'missing.arrow')]);
    expect(missing.code).not.toBe(0);
    expect(missing.stderr).toMatch(/stimuli\.arrow cannot be read \(ENOENT\)/);
    execFileSync('mkfifo', [join(folder, 'stimuli.arrow')]);
    const fifo = await runSonde(['tune', folder, '--out', join(dir, 'fifo.arrow')]);
    expect(fifo.code).toBe(2);
    expect(fifo.stderr).toMatch(/stimuli\.arrow is a FIFO/);
  });
});
