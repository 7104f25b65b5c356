/**
 * `sonde check`: an intact snapshot passes with what was verified; each kind of damage is named. The
 * expectations are exact properties of the files (a changed byte changes the SHA-256, a swapped file has
 * another width, a changed baseline manifest no longer has the recorded hash).
 */
import { cpSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let base: string;
let mod: string;

function copy(name: string, from = base): string {
  const target = join(dir, name);
  cpSync(from, target, { recursive: true });
  return target;
}

interface EditableManifest {
  created: string;
  layers: Array<Record<string, unknown>>;
  stimuli: Record<string, unknown>;
  baseline: Record<string, unknown>;
}

function editManifest(folder: string, edit: (m: EditableManifest) => void): void {
  const path = join(folder, 'manifest.json');
  const m = JSON.parse(readFileSync(path, 'utf8')) as EditableManifest;
  edit(m);
  writeFileSync(path, JSON.stringify(m, null, 2));
}

beforeAll(async () => {
  dir = tempFolder('sonde-check-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2 }));
  const s = writeStimuliNpy(dir, [9, 3, 16, 16]);
  base = (await recordSnapshot({ model, stimuli: s.npy, labels: s.labels, out: join(dir, 'base'), layers: 'all', batch: 4 })).folder;
  writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.4\n');
  mod = (await recordModulated({ model, stimuli: s.npy, labels: s.labels, out: join(dir, 'mod'), modulate: join(dir, 'spec.yaml'), from: base })).folder;
});

describe('checkSnapshot', () => {
  it('checkSnapshot(intact baseline and modulated snapshot) finds no problem and counts what it verified', async () => {
    const a = await checkSnapshot(base);
    expect(a.problems).toEqual([]);
    expect(a.ok).toBe(true);
    const manifest = JSON.parse(readFileSync(join(base, 'manifest.json'), 'utf8')) as { layers: unknown[] };
    expect(a.checked.layerFiles).toBe(manifest.layers.length);
    expect(a.checked.stimuli).toBe(9);
    const b = await checkSnapshot(mod);
    expect(b.problems).toEqual([]);
    expect(b.checked.baseline).toBe(true);
    const cli = await runSonde(['check', mod]);
    expect(cli.code).toBe(0);
    expect(cli.stdout).toMatch(/is intact: \d+ layer files .* and 9 stimuli verified, pairs with its baseline/);
  });

  it('checkSnapshot names a layer file swapped for another layer\'s (schema width)', async () => {
    const folder = copy('swapped');
    const m = JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as { layers: Array<{ file: string; shape: number[] }> };
    const [a, b] = [m.layers.findIndex((l) => l.shape[0] === 4), m.layers.findIndex((l) => l.shape[0] === 6)];
    cpSync(join(folder, m.layers[b]!.file), join(folder, m.layers[a]!.file));
    editManifest(folder, (x) => {
      delete x.layers[a]!['sha256'];
      delete x.layers[a]!['bytes'];
    });
    const report = await checkSnapshot(folder);
    expect(report.ok).toBe(false);
    expect(report.problems.map((p) => p.message).join('\n')).toMatch(/column channel_mean has 6 values per row, the manifest shape \[4, .*\] gives 4/);
  });

  it('checkSnapshot names wrong row counts, a stimuli digest that does not match, and a missing file', async () => {
    const folder = copy('rows');
    editManifest(folder, (x) => {
      x.layers[0]!['rows'] = 8;
      x.stimuli['digest'] = 'f'.repeat(64);
    });
    const m = JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as { layers: Array<{ file: string }> };
    rmSync(join(folder, m.layers[1]!.file));
    const report = await checkSnapshot(folder);
    const text = report.problems.map((p) => `${p.subject}: ${p.message}`).join('\n');
    expect(text).toMatch(/holds 9 rows, the manifest says 8/);
    expect(text).toMatch(/stimuli\.arrow: the per-stimulus digests do not give the stimuli digest/);
    expect(text).toMatch(new RegExp(`${m.layers[1]!.file}: is missing`));
  });

  it('checkSnapshot of a modulated snapshot whose baseline changed says the pairing no longer holds', async () => {
    const newBase = copy('base2');
    const newMod = copy('mod2', mod);
    editManifest(newMod, (x) => (x.baseline['path'] = '../base2'));
    expect((await checkSnapshot(newMod)).ok).toBe(true);
    editManifest(newBase, (x) => (x.created = '2000-01-01T00:00:00.000Z'));
    const report = await checkSnapshot(newMod);
    expect(report.problems).toEqual([{ subject: 'baseline', message: expect.stringMatching(/its manifest changed since this snapshot was recorded/) }]);
    const cli = await runSonde(['check', newMod, '--json']);
    expect(cli.code).toBe(1);
    expect(JSON.parse(cli.stdout).problems).toHaveLength(1);
    expect(cli.stderr).toMatch(/^sonde: snapshot .* has 1 problem; first: baseline: /);
  });

  it('checkSnapshot notes temporary files and a stale lock left by an interrupted writer', async () => {
    const folder = copy('leftovers');
    writeFileSync(join(folder, 'layers', 'x.arrow.partial'), 'half');
    writeFileSync(join(folder, '.lock'), JSON.stringify({ pid: 2 ** 22 + 12345, host: hostname(), started: 'then' }));
    const report = await checkSnapshot(folder);
    expect(report.ok).toBe(true);
    expect(report.notes.join('\n')).toMatch(/temporary files left by an interrupted write: layers\/x\.arrow\.partial/);
    expect(report.notes.join('\n')).toMatch(/stale lock of pid \d+ \(no longer running\)/);
  });
});
