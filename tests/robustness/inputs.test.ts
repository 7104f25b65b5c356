/**
 * Inputs that used to fail or mislead: models with Constant nodes and tensors that are not per
 * stimulus (`--layers all`, `sonde layers`), dynamic-shape models fed a `.npy` without --input-shape,
 * and the cued `.npy` stimulus sets whose labels.csv holds displays without labels.
 */
import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { createDisplaySet } from '../../src/stimuli/demo/display.js';
import { parseCsv } from '../../src/stimuli/source.js';
import { buildTinyNet, concatActivations, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;

beforeAll(() => {
  dir = tempFolder();
});

describe('models with Constant nodes', () => {
  it('sonde layers lists no Constant or constant-only tensor as a layer and names them as skipped, for a free and a fixed batch', async () => {
    for (const batch of ['batch', 1] as const) {
      const model = join(dir, `const-${batch}.onnx`);
      writeFileSync(model, buildTinyNet({ constants: true, batch, widths: [4, 4], classes: 3 }));
      const json = await runSonde(['layers', model, '--json']);
      expect(json.code, json.stderr).toBe(0);
      const listing = JSON.parse(json.stdout) as { layers: Array<{ name: string }>; skipped: Array<{ name: string; op: string; reason: string }> };
      const names = listing.layers.map((l) => l.name);
      expect(names).toContain('scaled0');
      for (const constant of ['scale0', 'prior_c', 'prior']) expect(names, `${batch}: ${constant}`).not.toContain(constant);
      expect(listing.skipped.filter((s) => s.reason === 'constant').map((s) => s.name).sort()).toEqual(['prior', 'prior_c', 'scale0']);
      const table = await runSonde(['layers', model]);
      expect(table.stdout).toMatch(/skipped \d+ tensors that are not per-stimulus activations: .*scale0 \(Constant, does not depend on the input\)/);
    }
  });

  it('sonde record --layers all skips constant tensors with a notice and records the rest; scaled0 is conv0 times its constant exactly', async () => {
    const model = join(dir, 'const-rec.onnx');
    writeFileSync(model, buildTinyNet({ constants: true, widths: [4, 4], classes: 3, seed: 2 }));
    const stim = writeStimuliNpy(dir, [5, 3, 16, 16], 8);
    const out = join(dir, 'const-all');
    const result = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', out, '--layers', 'all', '--batch', '2', '--threads', '1']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stderr).toMatch(/sonde: --layers all: skipped \d+ tensors that are not per-stimulus activations: .*prior_c \(Constant, does not depend on the input\)/);
    const names = openSnapshot(out).manifest.layers.map((l) => l.name);
    expect(names).toEqual(expect.arrayContaining(['conv0', 'scaled0', 'relu0', 'logits']));
    expect(names.filter((n) => ['scale0', 'prior_c', 'prior'].includes(n))).toEqual([]);
    // IEEE 754: one float32 multiplication is correctly rounded, so Mul(conv0, scale) = fround(conv0·scale)
    const conv = await concatActivations(openSnapshot(out).readLayer('conv0'));
    const scaled = await concatActivations(openSnapshot(out).readLayer('scaled0'));
    const spatial = 16 * 16;
    for (let i = 0; i < conv.length; i++) expect(scaled[i]).toBe(Math.fround(conv[i]! * (1 + 0.25 * (Math.floor(i / spatial) % 4))));
  });
});

describe('dynamic-shape models', () => {
  it('sonde record of a model with free spatial axes takes the input shape from the .npy stimuli without --input-shape', async () => {
    const model = join(dir, 'dynamic.onnx');
    writeFileSync(model, buildTinyNet({ dynamicSpatial: true, widths: [4, 4], classes: 3 }));
    const folder = join(dir, 'dyn-stim');
    mkdirSync(folder);
    const stim = writeStimuliNpy(folder, [3, 3, 12, 20], 1);
    const out = join(dir, 'dyn-rec');
    const result = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', out, '--threads', '1']);
    expect(result.code, result.stderr).toBe(0);
    const manifest = openSnapshot(out).manifest;
    expect(manifest.model.input.shape).toEqual([3, 12, 20]);
    // conv (pad 1) keeps 12×20, the 2×2 max-pool halves it
    expect(manifest.layers.find((l) => l.name === 'relu0')!.shape).toEqual([4, 12, 20]);
    expect(manifest.layers.find((l) => l.name === 'pool0')!.shape).toEqual([4, 6, 10]);
    // without stimuli to read a shape from, the model still asks for one
    const layers = await runSonde(['layers', model]);
    expect(layers.code).toBe(2);
    expect(layers.stderr).toMatch(/dynamic axes .*--input-shape/);
  });
});

describe('cued .npy stimulus sets', () => {
  it('parseCsv keeps a "" row as one empty field and drops blank lines (as the CPython csv module reads them)', () => {
    // CPython 3.11 csv.reader on 'label\n""\n\nring\n' gives [['label'], [''], [], ['ring']] and
    // csv.writer writes a lone empty value as "" (checked by hand, not run in CI); an empty row is no row
    expect(parseCsv('label\n""\n\nring\n', 'x.csv')).toEqual([['label'], [''], ['ring']]);
    expect(parseCsv('label\r\n""\r\n', 'x.csv')).toEqual([['label'], ['']]);
  });

  it('sonde stimuli make --cued K --format npy writes a labels.csv that sonde record --labels reads, displays without labels included', async () => {
    const set = join(dir, 'cued');
    const made = await runSonde(['stimuli', 'make', '--out', set, '--count', '6', '--seed', '3', '--cued', 'ring', '--kinds', 'ring', '--format', 'npy']);
    expect(made.code, made.stderr).toBe(0);
    const expected = createDisplaySet({ count: 6, seed: 3, cued: 'ring', kinds: ['ring'] });
    const wanted = Array.from({ length: 6 }, (_, i) => [...expected.render(i).labels]);
    expect(wanted.filter((l) => l.length === 0).length).toBe(3); // half the cued set lacks the only kind
    expect(readFileSync(join(set, 'labels.csv'), 'utf8').split('\n').filter((l) => l === '""')).toHaveLength(3);
    const model = join(dir, 'net64.onnx');
    writeFileSync(model, buildTinyNet({ input: [3, 64, 64], widths: [2, 2], classes: 2 }));
    const out = join(dir, 'cued-rec');
    const recorded = await runSonde(['record', model, '--stimuli', join(set, 'stimuli.npy'), '--labels', join(set, 'labels.csv'), '--out', out, '--threads', '1']);
    expect(recorded.code, recorded.stderr).toBe(0);
    expect(openSnapshot(out).stimuli.labels.map((l) => [...l])).toEqual(wanted);
  });
});
