/**
 * NaN/±Infinity in stimuli or produced by a modulation: `record` counts them per layer (manifest and one
 * warning line), and `diff` gives no noise-floor/survival/depth/task verdict on such data: it prints the
 * report with "no verdict: the data are non-finite" and exits 1.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { countNonFinite, FLOAT16_OVERFLOW } from '../../src/record/non-finite.js';
import { fromFloat16Bits, toFloat16Bits } from '../../src/snapshot/float16.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;

/** Sets element `index` of the float32 data of an .npy file (header length from its own header). */
function setNpyElement(path: string, index: number, value: number): void {
  const bytes = readFileSync(path);
  const start = 10 + bytes.readUInt16LE(8);
  bytes.writeFloatLE(value, start + 4 * index);
  writeFileSync(path, bytes);
}

const manifestOf = (folder: string) => JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as { stimuli: { nonFinite?: number }; layers: Array<{ name: string; nonFinite?: number }> };

beforeAll(() => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ seed: 9, classes: 2, widths: [4, 4] }));
});

describe('countNonFinite', () => {
  it('countNonFinite(data) counts NaN and ±Infinity exactly, and with the float16 bound the values float16 turns into ±Infinity', () => {
    const data = Float32Array.from([0, NaN, 1, Infinity, -Infinity, 3.4e38, -0, 65519, 65520, -70000]);
    expect(countNonFinite(data)).toBe(3);
    expect(countNonFinite(data, 4, 10)).toBe(1);
    expect(countNonFinite(new Float32Array(0))).toBe(0);
    // IEEE 754-2008 binary16: largest finite 65504; round-to-nearest-even sends 65520 and up to Infinity
    expect(fromFloat16Bits(toFloat16Bits(65519))).toBe(65504);
    expect(fromFloat16Bits(toFloat16Bits(FLOAT16_OVERFLOW))).toBe(Infinity);
    expect(countNonFinite(data, 0, data.length, FLOAT16_OVERFLOW)).toBe(3 + 1 + 1 + 1); // + 3.4e38, 65520, -70000
  });
});

describe('non-finite data through record and diff', () => {
  it('sonde record warns in one line with per-layer counts for a NaN stimulus, and sonde diff then exits 1 with no noise-floor verdict', async () => {
    const folder = join(dir, 'nan');
    (await import('node:fs')).mkdirSync(folder);
    const stim = writeStimuliNpy(folder, [6, 3, 16, 16], 4, ['cat', 'dog', 'cat', 'dog', 'cat', 'dog']);
    setNpyElement(stim.npy, 2 * 3 * 16 * 16 + 17, Number.NaN); // stimulus 2, one element
    const base = join(dir, 'nan-base');
    const recorded = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', base, '--batch', '4', '--threads', '1']);
    expect(recorded.code, recorded.stderr).toBe(0);
    const warning = recorded.stderr.split('\n').filter((l) => l.includes('NaN'));
    expect(warning).toHaveLength(1);
    expect(warning[0]).toMatch(/^sonde: warning: NaN\/±Infinity values in \d+ of \d+ recorded layers \(relu0 36, .*the stimuli themselves hold 1;/);
    const manifest = manifestOf(base);
    expect(manifest.stimuli.nonFinite).toBe(1);
    // a 3×3 convolution with padding 1 spreads one interior NaN to its 3×3 neighbourhood in each of its 4
    // maps (IEEE 754: NaN propagates through + and ×), and ReLU keeps them
    expect(manifest.layers.find((l) => l.name === 'relu0')!.nonFinite).toBe(4 * 9);
    const spec = join(dir, 'uniform.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu0', kind: 'uniform', gain: 1.5 }));
    const mod = join(dir, 'nan-mod');
    expect((await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', mod, '--modulate', spec, '--from', base, '--threads', '1'])).code).toBe(0);
    const diff = await runSonde(['diff', base, mod, '--bootstrap', '0']);
    expect(diff.code).toBe(1);
    expect(diff.stdout).toMatch(/verdict: no verdict: the data are non-finite — NaN\/±Infinity values in \d+ of \d+ layers, from relu0 on/);
    expect(diff.stdout).not.toMatch(/noise floor|halves every|doubles every|keeps its size/);
    expect(diff.stderr.trim().split('\n')).toHaveLength(1);
    expect(diff.stderr).toMatch(/layers hold NaN\/±Infinity values \(first: relu0\); the report has no verdict/);
    // the same comparison in two shards of partial statistics, merged: the same refusal
    const parts = [1, 2].map((k) => join(dir, `nan-part-${k}.json`));
    for (const [k, part] of parts.entries()) expect((await runSonde(['diff', base, mod, '--bootstrap', '0', '--shard', `${k + 1}/2`, '--partial', part])).code).toBe(0);
    const merged = await runSonde(['merge', ...parts]);
    expect(merged.code).toBe(1);
    expect(merged.stdout).toMatch(/verdict: no verdict: the data are non-finite/);
    expect(merged.stderr).toMatch(/merge of 2 diff partials: \d+ of \d+ layers hold NaN/);
  });

  it('sonde record with a modulation that overflows float32 counts the infinities below the site, and diff refuses a verdict', async () => {
    const folder = join(dir, 'fine');
    (await import('node:fs')).mkdirSync(folder);
    const stim = writeStimuliNpy(folder, [4, 3, 16, 16], 5, ['cat', 'dog', 'cat', 'dog']);
    const base = join(dir, 'fine-base');
    const plain = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', base, '--threads', '1']);
    expect(plain.code).toBe(0);
    expect(plain.stderr).not.toMatch(/NaN/);
    expect(manifestOf(base).layers.every((l) => l.nonFinite === 0)).toBe(true);
    const spec = join(dir, 'huge.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu0', kind: 'uniform', gain: 1e38 }));
    const mod = join(dir, 'huge-mod');
    const recorded = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', mod, '--modulate', spec, '--from', base, '--threads', '1']);
    expect(recorded.code, recorded.stderr).toBe(0);
    expect(recorded.stderr).toMatch(/warning: NaN\/±Infinity values in \d+ of \d+ recorded layers/);
    const layers = manifestOf(mod).layers;
    expect(layers.find((l) => l.name === 'logits')!.nonFinite).toBeGreaterThan(0);
    const diff = await runSonde(['diff', base, mod, '--bootstrap', '0', '--json']);
    expect(diff.code).toBe(1);
    const report = JSON.parse(diff.stdout) as { verdict: string; layers: Array<{ name: string; aboveFloor: boolean; nonFinite: { mod: number } }> };
    expect(report.verdict).toMatch(/^no verdict: the data are non-finite/);
    for (const layer of report.layers) if (layer.nonFinite.mod > 0) expect(layer.aboveFloor, layer.name).toBe(false);
  });
});
