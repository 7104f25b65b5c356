import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { beforeAll, describe, expect, it } from 'vitest';
import { readSensitivityTable, readTuningTable } from '../../src/snapshot/tables.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let scalarModel: string;
let stim: { npy: string; labels: string };
let small: { npy: string; labels: string };
let snapshot: string;

/** input [N,3,8,8] → conv → relu0 → gap → flat → logits [N,2], plus "score" = mean of the logits, shape [N] (no channel axis). */
function scalarOutputModel(): Uint8Array {
  const f32 = (values: number[]) => {
    const a = Float32Array.from(values);
    return new Uint8Array(a.buffer);
  };
  const model: onnxProto.onnx.IModelProto = {
    irVersion: 8,
    opsetImport: [{ domain: '', version: 13 }],
    graph: {
      name: 'scalar',
      node: [
        { name: 'c', opType: 'Conv', input: ['input', 'W'], output: ['conv0'], attribute: [{ name: 'pads', type: 7, ints: [1, 1, 1, 1] }] },
        { name: 'r', opType: 'Relu', input: ['conv0'], output: ['relu0'] },
        { name: 'g', opType: 'GlobalAveragePool', input: ['relu0'], output: ['gap'] },
        { name: 'f', opType: 'Flatten', input: ['gap'], output: ['flat'] },
        { name: 'm', opType: 'MatMul', input: ['flat', 'Wfc'], output: ['logits'] },
        { name: 's', opType: 'ReduceMean', input: ['logits'], output: ['score'], attribute: [{ name: 'axes', type: 7, ints: [1] }, { name: 'keepdims', type: 2, i: 0 }] },
      ],
      initializer: [
        { name: 'W', dims: [2, 3, 3, 3], dataType: 1, rawData: f32(Array.from({ length: 54 }, (_, i) => Math.sin(i + 1) * 0.3)) },
        { name: 'Wfc', dims: [2, 2], dataType: 1, rawData: f32([1, -0.5, 0.25, 2]) },
      ],
      input: [{ name: 'input', type: { tensorType: { elemType: 1, shape: { dim: [{ dimParam: 'batch' }, { dimValue: 3 }, { dimValue: 8 }, { dimValue: 8 }] } } } }],
      output: [
        { name: 'logits', type: { tensorType: { elemType: 1 } } },
        { name: 'score', type: { tensorType: { elemType: 1 } } },
      ],
    },
  };
  return onnxProto.onnx.ModelProto.encode(model).finish();
}

/** input [N, 2, 4, 4] → Relu "act" → GlobalAveragePool → Flatten → Mul(v, v) "square": its fd_error is h/2 of the largest sensitivity. */
function quadraticModel(): Uint8Array {
  return onnxProto.onnx.ModelProto.encode({
    irVersion: 8,
    opsetImport: [{ domain: '', version: 13 }],
    graph: {
      name: 'quadratic',
      node: [
        { name: 'r', opType: 'Relu', input: ['input'], output: ['act'] },
        { name: 'g', opType: 'GlobalAveragePool', input: ['act'], output: ['gap'] },
        { name: 'f', opType: 'Flatten', input: ['gap'], output: ['v'] },
        { name: 'm', opType: 'Mul', input: ['v', 'v'], output: ['square'] },
      ],
      input: [{ name: 'input', type: { tensorType: { elemType: 1, shape: { dim: [{ dimParam: 'batch' }, { dimValue: 2 }, { dimValue: 4 }, { dimValue: 4 }] } } } }],
      output: [{ name: 'square', type: { tensorType: { elemType: 1 } } }],
    },
  }).finish();
}

/** Every failure is one line on stderr, no stack, exit code 2. */
async function expectUsageError(args: string[], pattern: RegExp): Promise<void> {
  const result = await runSonde(args);
  expect(result.code, result.stderr).toBe(2);
  expect(result.stderr.trim().split('\n')).toHaveLength(1);
  expect(result.stderr).toMatch(pattern);
  expect(result.stderr).not.toMatch(/\n\s+at /);
}

beforeAll(async () => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 51, classes: 3 }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds: ['bird', 'cat', 'dog'] } }));
  scalarModel = join(dir, 'scalar.onnx');
  writeFileSync(scalarModel, scalarOutputModel());
  mkdirSync(join(dir, 'small'));
  small = writeStimuliNpy(join(dir, 'small'), [4, 3, 8, 8], 23);
  const labels = Array.from({ length: 8 }, (_, i) => ['cat', 'dog', 'bird', 'cat;dog'][i % 4]!);
  stim = writeStimuliNpy(dir, [8, 3, 16, 16], 17, labels);
  snapshot = join(dir, 'base');
  const recorded = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', snapshot, '--layers', 'all', '--batch', '4', '--threads', '1']);
  expect(recorded.code, recorded.stderr).toBe(0);
});

describe('sonde tune / sonde sense (CLI)', () => {
  it('sonde tune SNAPSHOT --out writes a tuning table and prints one row per layer with sparklines across depth', async () => {
    const out = join(dir, 'tuning.arrow');
    const result = await runSonde(['tune', snapshot, '--out', out, '--layers', 'relu0+relu1+relu2']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stdout).toMatch(/tuned 3 layers of .* for 3 categories \(stimuli per category: bird 2, cat 4, dog 4; 0 stimuli without a category left out\)/);
    expect(result.stdout).toMatch(/relu0 .*Relu/);
    expect(result.stdout).toMatch(/across depth: selective [▁-█]{3} {2}mean selectivity [▁-█]{3}/);
    expect(readTuningTable(out).blocks.map((b) => b.layer)).toEqual(['relu0', 'relu1', 'relu2']);
    const json = await runSonde(['tune', snapshot, '--out', join(dir, 'tuning2.arrow'), '--layers', 'relu2', '--json']);
    const parsed = JSON.parse(json.stdout) as { counts: Record<string, number>; layers: Array<{ layer: string; channels: number }> };
    expect(parsed.counts).toEqual({ bird: 2, cat: 4, dog: 4 });
    expect(parsed.layers).toMatchObject([{ layer: 'relu2', channels: 8 }]);
  });

  it('sonde tune marks layers with negative responses (a pre-activation Conv output), where the selectivity index is undefined, instead of printing NaN', async () => {
    const result = await runSonde(['tune', snapshot, '--out', join(dir, 'tuning-conv.arrow'), '--layers', 'conv0+relu0', '--json']);
    const parsed = JSON.parse(result.stdout) as { layers: Array<{ layer: string; negativeChannels: number }> };
    const conv = parsed.layers.find((l) => l.layer === 'conv0')!;
    expect(conv.negativeChannels).toBeGreaterThan(0); // seeded random weights with a bias: some channels go below zero
    expect(parsed.layers.find((l) => l.layer === 'relu0')!.negativeChannels).toBe(0); // ReLU outputs are ≥ 0 (exact)
    const text = await runSonde(['tune', snapshot, '--out', join(dir, 'tuning-conv.arrow'), '--layers', 'conv0+relu0', '--force']);
    expect(text.stdout).not.toMatch(/NaN *│ *│ *│/);
    expect(text.stdout).toMatch(/conv0 .*\*/);
    expect(text.stdout).toMatch(/^\* channels with a negative mean response to some category have no selectivity index/m);
  });

  it('sonde sense --from --stimuli-of each writes a sensitivity table; sonde tune TABLE --against compares them; sonde record --tuning uses the table', async () => {
    const sens = join(dir, 'sens.arrow');
    const sensed = await runSonde(['sense', model, '--from', snapshot, '--site', 'relu1', '--site', 'relu2', '--readout', 'logits', '--stimuli-of', 'each', '--out', sens, '--threads', '1']);
    expect(sensed.code, sensed.stderr).toBe(0);
    expect(sensed.stdout).toMatch(/gain sensitivities of logits \(3 units\), exact gradients \(reverse mode, in the ONNX graph\), boundary tensors from baseline/);
    expect(sensed.stdout).toMatch(/relu1 .* 6 .* 3 /);
    const table = readSensitivityTable(sens);
    expect(table.categories).toEqual(['bird', 'cat', 'dog']);
    expect(Array.from(table.block('relu1')!.count)).toEqual([2, 4, 4]);
    const tuning = join(dir, 'tuning-cmp.arrow');
    expect((await runSonde(['tune', snapshot, '--out', tuning])).code).toBe(0);
    const compared = await runSonde(['tune', tuning, '--against', sens]);
    expect(compared.code, compared.stderr).toBe(0);
    expect(compared.stdout).toMatch(/tuning vs sensitivity .*z-scored across categories/);
    expect(compared.stdout).toMatch(/pooled r/);
    expect(compared.stdout).toMatch(/pooled r across depth: [▁-█]{2}/);
    const spec = join(dir, 'spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu1', kind: 'tuning', target: 'dog', strength: 0.5 }));
    const recorded = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', join(dir, 'mod'), '--modulate', spec, '--from', snapshot, '--tuning', tuning, '--threads', '1']);
    expect(recorded.code, recorded.stderr).toBe(0);
    const manifest = JSON.parse(readFileSync(join(dir, 'mod', 'manifest.json'), 'utf8')) as { modulation: { modulations: Array<{ kind: string; details: { target: string } }> } };
    expect(manifest.modulation.modulations[0]).toMatchObject({ kind: 'tuning', details: { target: 'dog' } });
  });

  it('sonde sense without a baseline runs the whole network for the boundary tensors (one readout unit by name)', async () => {
    const out = join(dir, 'sens-net.arrow');
    const result = await runSonde(['sense', model, '--stimuli', stim.npy, '--labels', stim.labels, '--site', 'relu2', '--readout', 'logits:cat', '--kind', 'offset', '--method', 'richardson', '--out', out, '--threads', '1', '--json']);
    expect(result.code, result.stderr).toBe(0);
    const parsed = JSON.parse(result.stdout) as { source: string; readout: { units: number[]; categories: string[] }; sites: Array<{ kind: string; prefixRuns: number; rows: number }> };
    expect(parsed.source).toBe('network');
    expect(parsed.readout).toMatchObject({ units: [1], categories: ['cat'] });
    expect(parsed.sites[0]).toMatchObject({ kind: 'offset', prefixRuns: 1, rows: 8 * (1 + 4 * 8) });
    expect(existsSync(out)).toBe(true);
  });
});

describe('sonde sense (warnings)', () => {
  it('sonde sense warns on stderr, in one line, when fd_error is large against the category maximum, and still succeeds', async () => {
    const folder = join(dir, 'quadratic');
    mkdirSync(folder);
    const quadratic = join(folder, 'quadratic.onnx');
    writeFileSync(quadratic, quadraticModel());
    const input = writeStimuliNpy(folder, [4, 2, 4, 4], 29);
    // the secant warns on the curvature it sees within the step (Richardson is exact on a quadratic)
    const warned = await runSonde(['sense', quadratic, '--stimuli', input.npy, '--site', 'act', '--step', '0.2', '--method', 'secant', '--out', join(folder, 'q.arrow'), '--threads', '1']);
    expect(warned.code, warned.stderr).toBe(0);
    expect(warned.stderr.trim().split('\n')).toHaveLength(1);
    expect(warned.stderr).toMatch(/^sonde: warning: site "act": fd_error \(curvature within ±0\.2\) exceeds 5\.0% .*--method richardson/);
    const quiet = await runSonde(['sense', quadratic, '--stimuli', input.npy, '--site', 'act', '--step', '0.2', '--out', join(folder, 'q2.arrow'), '--threads', '1']);
    expect(quiet.code).toBe(0);
    expect(quiet.stderr).toBe('');
  });
});

describe('sonde tune / sonde sense (bad input)', () => {
  it('sonde tune on a snapshot without labels says so', async () => {
    const bare = join(dir, 'bare');
    expect((await runSonde(['record', model, '--stimuli', stim.npy, '--labels', 'none', '--out', bare, '--threads', '1'])).code).toBe(0);
    await expectUsageError(['tune', bare, '--out', join(dir, 't-bare.arrow')], /snapshot .*bare has no labels \(8 stimuli, none labelled\)/);
  });

  it('sonde tune --single-label with a category that appears only on multi-label stimuli names the category', async () => {
    const labels = Array.from({ length: 8 }, (_, i) => ['cat', 'bird', 'cat;dog', 'bird'][i % 4]!);
    mkdirSync(join(dir, 'multi-stimuli'));
    const other = writeStimuliNpy(join(dir, 'multi-stimuli'), [8, 3, 16, 16], 19, labels);
    const snap = join(dir, 'multi');
    expect((await runSonde(['record', model, '--stimuli', other.npy, '--labels', other.labels, '--out', snap, '--threads', '1'])).code).toBe(0);
    await expectUsageError(['tune', snap, '--out', join(dir, 't-multi.arrow'), '--single-label'], /tuning category "dog" has no stimuli with a single label/);
  });

  it('sonde tune without --out, and sonde record --tuning without --modulate, are usage errors', async () => {
    await expectUsageError(['tune', snapshot], /needs --out FILE\.arrow/);
    await expectUsageError(['record', model, '--stimuli', stim.npy, '--out', join(dir, 'x'), '--tuning', join(dir, 'tuning.arrow')], /--tuning and --sensitivity need --modulate/);
  });

  it('sonde sense with a site that has no feature axis, or does not exist, says which', async () => {
    await expectUsageError(['sense', scalarModel, '--stimuli', small.npy, '--site', 'score', '--readout', 'logits', '--out', join(dir, 's1.arrow')], /--site "score" has no feature axis \(shape \[\] per stimulus\)/);
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--site', 'relu9', '--out', join(dir, 's2.arrow')], /--site "relu9" not found .*closest: "relu0"/);
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--out', join(dir, 's2b.arrow')], /needs --sites TENSOR/);
  });

  it('sonde sense with a readout that does not exist, or a unit it lacks, says so', async () => {
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--site', 'relu1', '--readout', 'nope', '--out', join(dir, 's3.arrow')], /tensor "nope" does not exist in net\.onnx \(outputs: logits/);
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--site', 'relu1', '--readout', 'logits:zebra', '--out', join(dir, 's4.arrow')], /"zebra" is not a unit of "logits" \(3 units: bird, cat, dog/);
  });

  it('sonde sense with a step that is not positive rejects it', async () => {
    for (const step of ['0', '-0.01', 'abc']) {
      await expectUsageError(['sense', model, '--stimuli', stim.npy, '--site', 'relu1', '--step', step, '--out', join(dir, 's5.arrow')], /--step .* is not a positive number/);
    }
  });

  it('sonde sense with an unknown --method names the three it knows', async () => {
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--site', 'relu1', '--method', 'forward', '--out', join(dir, 's5m.arrow')], /--method must be exact or richardson or secant, got "forward"/);
  });

  it('sonde sense --from a baseline that lacks a tensor the downstream part reads, or with a fixed-batch model, says what to do', async () => {
    const partial = join(dir, 'partial');
    expect((await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', partial, '--layers', 'relu2', '--threads', '1'])).code).toBe(0);
    await expectUsageError(['sense', model, '--from', partial, '--site', 'relu1', '--out', join(dir, 's8.arrow')], /--from .*partial: the part downstream of the site reads "relu1", and the baseline did not record it/);
    const fixed = join(dir, 'fixed.onnx');
    writeFileSync(fixed, buildTinyNet({ batch: 1, seed: 3 }));
    await expectUsageError(['sense', fixed, '--stimuli', stim.npy, '--site', 'relu1', '--out', join(dir, 's9.arrow')], /fixed\.onnx has a fixed batch axis \(1\)/);
  });

  it('sonde sense --stimuli-of a category no stimulus carries names the labels there are', async () => {
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--labels', stim.labels, '--site', 'relu1', '--stimuli-of', 'cow', '--out', join(dir, 's6.arrow')], /--stimuli-of "cow": no stimulus carries this category \(labels: bird, cat, dog/);
    await expectUsageError(['sense', model, '--stimuli', stim.npy, '--labels', 'none', '--site', 'relu1', '--stimuli-of', 'cat', '--out', join(dir, 's7.arrow')], /--stimuli-of cat: the stimuli carry no labels/);
  });
});

describe('sonde sense --per head', () => {
  const heads = new URL('../reference/fixtures/attention/tokens/heads-net.onnx', import.meta.url).pathname;
  const inputs = new URL('../reference/fixtures/attention/inputs.npy', import.meta.url).pathname;

  it('sonde sense --per head lists one value per head of the merged heads of a tiny attention network, and says what they sum', async () => {
    const out = join(dir, 'per-head.arrow');
    const result = await runSonde(['sense', heads, '--stimuli', inputs, '--sites', '/Reshape_2_output_0', '--per', 'head', '--out', out, '--threads', '1']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stdout).toMatch(/4 heads/);
    expect(result.stdout).toMatch(/per head: the sum over the head's features/);
    expect(readSensitivityTable(out).block('/Reshape_2_output_0')!.channels).toBe(4);
  });

  it('sonde sense --per with another word, or at a tensor whose heads are mixed, is a one-line usage error', async () => {
    await expectUsageError(['sense', heads, '--stimuli', inputs, '--sites', '/Reshape_2_output_0', '--per', 'heads', '--out', join(dir, 'p1.arrow')], /--per must be feature or head, got "heads"/);
    await expectUsageError(['sense', heads, '--stimuli', inputs, '--sites', '/proj/Add_output_0', '--per', 'head', '--out', join(dir, 'p2.arrow')], /--per head: the heads of "\/proj\/Add_output_0" are not known/);
  });

  it('sonde record --modulate lesion top: 1 per: head rankBy: sensitivity takes a per-head table: it silences the head with the largest z-scored value for the target', async () => {
    const table = join(dir, 'per-head-rank.arrow');
    expect((await runSonde(['sense', heads, '--stimuli', inputs, '--sites', '/Reshape_2_output_0', '--per', 'head', '--out', table, '--threads', '1'])).code).toBe(0);
    const base = join(dir, 'heads-base');
    expect((await runSonde(['record', heads, '--stimuli', inputs, '--out', base, '--layers', 'all', '--threads', '1'])).code).toBe(0);
    const spec = join(dir, 'lesion-top-head.yaml');
    writeFileSync(spec, 'site: /Reshape_2_output_0\nkind: lesion\nper: head\ntop: 1\ntarget: "3"\nrankBy: sensitivity\n');
    const mod = join(dir, 'heads-lesioned');
    const run = await runSonde(['record', heads, '--stimuli', inputs, '--modulate', spec, '--sensitivity', table, '--from', base, '--out', mod, '--threads', '1']);
    expect(run.code, run.stderr).toBe(0);
    // by hand: z-score each head's 10 values across categories (population sd), take category "3"
    const block = readSensitivityTable(table).block('/Reshape_2_output_0')!;
    const K = 10;
    const z = Array.from({ length: 4 }, (_, h) => {
      const row = Array.from({ length: K }, (_, c) => block.sensitivity[h * K + c]!);
      const mean = row.reduce((a, b) => a + b, 0) / K;
      const sd = Math.sqrt(row.reduce((a, b) => a + (b - mean) ** 2, 0) / K);
      return (row[3]! - mean) / sd;
    });
    const best = z.indexOf(Math.max(...z));
    const manifest = JSON.parse(readFileSync(join(mod, 'manifest.json'), 'utf8')) as { modulation: { modulations: Array<{ details: Record<string, unknown>; gain: number[] }> } };
    expect(manifest.modulation.modulations[0]!.details['heads']).toEqual([best]);
    expect(manifest.modulation.modulations[0]!.gain.slice(best * 4, best * 4 + 4)).toEqual([0, 0, 0, 0]);
  });
});
