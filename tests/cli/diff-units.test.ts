/**
 * `sonde diff` on the small seeded torchvision VisionTransformer (tests/reference/fixtures/attention,
 * made by tests/reference/make_token_fixtures.py with Debian's python3-torch): token layers are diffed
 * per feature (over all tokens) and every listing says so (issue 19: "every table says which"). The
 * reference for which layers are token tensors and how many features they have is PyTorch's module
 * structure, written into fixtures/attention/tokens/index.json (block 0's output: 16 features).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';

const FOLDER = new URL('../reference/fixtures/attention/', import.meta.url).pathname;
const MODEL = join(FOLDER, 'vit-opset14.onnx');
const INPUTS = join(FOLDER, 'inputs.npy');
const INDEX = JSON.parse(readFileSync(join(FOLDER, 'tokens', 'index.json'), 'utf8')) as { block0: string; sensitivities: Array<{ onnx: string; features: number }> };

let dir: string;

async function record(out: string, extra: string[]): Promise<void> {
  const result = await runSonde(['record', MODEL, '--stimuli', INPUTS, '--out', out, '--threads', '1', ...extra]);
  expect(result.code, result.stderr).toBe(0);
}

beforeAll(async () => {
  dir = tempFolder('sonde-diff-units-');
  writeFileSync(join(dir, 'gain.json'), JSON.stringify({ site: INDEX.block0, kind: 'uniform', gain: 2.5 }));
  await record(join(dir, 'base'), []);
  await record(join(dir, 'mod'), ['--modulate', join(dir, 'gain.json'), '--from', join(dir, 'base')]);
  // token layers only: block outputs and MLP activations
  await record(join(dir, 'base-tokens'), ['--layers', '/encoder/layers/*/Add_1_output_0']);
  await record(join(dir, 'mod-tokens'), ['--modulate', join(dir, 'gain.json'), '--from', join(dir, 'base-tokens')]);
}, 120_000);

describe('sonde diff (units of token layers)', () => {
  it('sonde diff --json: every token layer is diffed per feature, the logits per channel, as the manifest layouts say; block 0 has the 16 features of PyTorch\'s block', async () => {
    const result = await runSonde(['diff', join(dir, 'base'), join(dir, 'mod'), '--json', '--bootstrap', '0']);
    expect(result.code, result.stderr).toBe(0);
    const report = JSON.parse(result.stdout) as { layers: Array<{ name: string; unit?: string }> };
    const manifest = JSON.parse(readFileSync(join(dir, 'base', 'manifest.json'), 'utf8')) as { layers: Array<{ name: string; shape: number[]; layout?: { kind: string } }> };
    const layouts = new Map(manifest.layers.map((l) => [l.name, l]));
    expect(report.layers.length).toBeGreaterThan(2);
    for (const row of report.layers) {
      const entry = layouts.get(row.name)!;
      const tokens = entry.shape.length === 2; // [T, D] per stimulus
      expect(row.unit, row.name).toBe(tokens ? 'features' : 'channels');
    }
    expect(report.layers.find((l) => l.name === 'logits')!.unit).toBe('channels');
    const block0 = INDEX.sensitivities.find((s) => s.onnx === INDEX.block0)!;
    expect(report.layers.find((l) => l.name === INDEX.block0)!.unit).toBe('features');
    expect(layouts.get(INDEX.block0)!.shape.at(-1)).toBe(block0.features);
  });

  it('sonde diff: the listing of token layers only speaks of features, never of channels; the CSV has a unit column', async () => {
    const csv = join(dir, 'tokens.csv');
    const result = await runSonde(['diff', join(dir, 'base-tokens'), join(dir, 'mod-tokens'), '--bootstrap', '0', '--csv', csv]);
    expect(result.code, result.stderr).toBe(0);
    const text = result.stdout.replace(/\n\s+/g, ' '); // wrapped lines joined
    expect(text).toMatch(/ratio: modulated ÷ baseline feature means \(mean ± sd over features\)/);
    expect(text).toMatch(/up\/down: features changed beyond ±tolerance/);
    expect(result.stdout).not.toMatch(/channel/);
    const lines = readFileSync(csv, 'utf8').trim().split('\n');
    expect(lines[0]!.split(',').at(-1)).toBe('unit');
    for (const line of lines.slice(1)) expect(line.split(',').at(-1)).toBe('features');
  });

  it('sonde diff: a listing mixing token layers and the logits says "unit" and names where each applies', async () => {
    const result = await runSonde(['diff', join(dir, 'base'), join(dir, 'mod'), '--bootstrap', '0']);
    expect(result.code, result.stderr).toBe(0);
    const text = result.stdout.replace(/\n\s+/g, ' '); // wrapped lines joined
    expect(text).toMatch(/ratio: modulated ÷ baseline unit means \(mean ± sd over units\)/);
    expect(text).toMatch(/units: channels \(of feature maps and vectors\) at logits; features \(of token tensors, over all tokens\) elsewhere/);
  });
});
