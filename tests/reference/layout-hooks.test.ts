/**
 * Recorded tensors, their layouts and channel means against PyTorch forward hooks (fixtures written by
 * tests/reference/make_layout_fixtures.py with Debian's python3-torch):
 * - the small seeded torchvision VisionTransformer (fixtures/attention/, opsets 14 and 17): the default
 *   selection records exactly the tensors that leave the hooked modules' export scopes (block, MLP
 *   activation nn.GELU, attention) plus the logits; each recorded value within 1e-4 relative of the
 *   hook (max |sonde − torch| / max |torch|, the issue's contract), its channel means within 1e-5
 *   relative of NumPy's mean over the 17 tokens, per feature;
 * - a channels-last stretch (Conv → permute to NHWC → Linear → ReLU): channel means of the ReLU equal
 *   NumPy's mean over H and W per channel;
 * - an attention written batch first: the [N, H, T, T] softmax is recorded with its heads as features,
 *   values within 1e-4 of the hook, channel means 1/T per head (exact property: softmax rows sum to 1).
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { inspectModel } from '../../src/record/inspect-model.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot, type Snapshot } from '../../src/snapshot/snapshot.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { tempFolder } from '../helpers/onnx-builder.js';
import { maxRelativeError } from '../helpers/max-relative-error.js';

const ATTENTION = new URL('./fixtures/attention/', import.meta.url).pathname;
const LAYOUTS = new URL('./fixtures/layouts/', import.meta.url).pathname;

function npy(path: string): { data: Float64Array; shape: number[] } {
  const parsed = parseNpy(readFileSync(path), path);
  return { data: Float64Array.from(parsed.data as ArrayLike<number>), shape: parsed.shape };
}

async function read(snap: Snapshot, name: string): Promise<{ values: Float32Array; means: Float32Array }> {
  const { elements, channels } = snap.layerGeometry(name);
  const n = snap.manifest.stimuli.count;
  const values = new Float32Array(n * elements);
  const means = new Float32Array(n * channels);
  for await (const batch of snap.readLayer(name)) {
    values.set(batch.activation!, batch.index[0]! * elements);
    means.set(batch.channelMeans, batch.index[0]! * channels);
  }
  return { values, means };
}


describe.each([14, 17])('recordSnapshot on the seeded VisionTransformer at opset %i vs PyTorch hooks', (opset) => {
  const model = join(ATTENTION, `vit-opset${opset}.onnx`);
  const index = JSON.parse(readFileSync(join(ATTENTION, 'hooks', `index-opset${opset}.json`), 'utf8')) as Array<{ module: string; onnx: string; slug: string; role: string }>;

  it('inspectModel: the default selection is the hooked modules\' outputs plus the logits, all tokens 17×D with the 1+4×4 grid', async () => {
    const inspection = await inspectModel(model);
    const defaults = inspection.layers.filter((l) => l.default).map((l) => l.name);
    expect(defaults.sort()).toEqual([...index.map((e) => e.onnx), 'logits'].sort());
    for (const entry of index) {
      const layer = inspection.layers.find((l) => l.name === entry.onnx)!;
      expect(layer.layout).toMatchObject({ kind: 'tokens', featureAxis: 1, source: 'graph', grid: { prefix: 1, height: 4, width: 4 } });
      // torchvision's attention (2 heads) is the only producer with heads
      expect(layer.layout.heads).toBe(entry.role === 'attention output' ? 2 : undefined);
    }
    // the attention internals run sequence-first: nothing of them is recordable, each skipped with where the batch went
    const softmax = inspection.skippedTensors.filter((t) => t.op === 'Softmax');
    expect(softmax).toHaveLength(2);
    for (const t of softmax) expect(t).toMatchObject({ reason: 'batch-merged', dims: ['N·2', '17', '17'] });
    const sequenceFirst = inspection.skippedTensors.find((t) => t.name.endsWith('encoder_layer_0/self_attention/Transpose_output_0'))!;
    expect(sequenceFirst).toMatchObject({ reason: 'batch-later', dims: ['17', 'N', '16'] });
  });

  it('recordSnapshot: default tensors within 1e-4 of the hooks, channel means per feature within 1e-5 of the token mean', async () => {
    const out = join(tempFolder(), 'vit');
    await recordSnapshot({ model, stimuli: join(ATTENTION, 'inputs.npy'), out, batch: 2, threads: 1 });
    const snap = openSnapshot(out);
    for (const entry of index) {
      const hook = npy(join(ATTENTION, 'hooks', `${entry.slug}.npy`));
      const means = npy(join(ATTENTION, 'hooks', `${entry.slug}_means.npy`));
      const manifestEntry = snap.manifest.layers.find((l) => l.name === entry.onnx)!;
      expect(manifestEntry.layout?.kind).toBe('tokens');
      expect(manifestEntry.shape).toEqual(hook.shape.slice(1));
      const got = await read(snap, entry.onnx);
      expect(got.means.length).toBe(2 * hook.shape[2]!); // one mean per feature, not per token
      expect(maxRelativeError(got.values, hook.data), `${entry.module} (${entry.role})`).toBeLessThan(1e-4);
      expect(maxRelativeError(got.means, means.data), `${entry.module} means`).toBeLessThan(1e-5);
    }
  });
});

describe('recordSnapshot on graphs with other layouts vs PyTorch hooks', () => {
  const index = JSON.parse(readFileSync(join(LAYOUTS, 'index.json'), 'utf8')) as Record<string, Record<string, string>>;

  it('channels-last: the ReLU after a permute to NHWC has features last; channel means = mean over H and W', async () => {
    const model = join(LAYOUTS, 'channels-last.onnx');
    const name = index['channels-last']!.relu!;
    const inspection = await inspectModel(model);
    expect(inspection.layers.find((l) => l.name === name)!.layout).toEqual({ kind: 'channels-last', featureAxis: 2, source: 'graph' });
    // the Conv before the permute stays channels-first
    expect(inspection.layers.find((l) => l.op === 'Conv')!.layout.kind).toBe('channels-first');
    const out = join(tempFolder(), 'nhwc');
    await recordSnapshot({ model, stimuli: join(LAYOUTS, 'channels-last-inputs.npy'), out, layers: name, batch: 2, threads: 1 });
    const got = await read(openSnapshot(out), name);
    expect(maxRelativeError(got.values, npy(join(LAYOUTS, 'relu.npy')).data)).toBeLessThan(1e-4);
    expect(maxRelativeError(got.means, npy(join(LAYOUTS, 'relu_means.npy')).data)).toBeLessThan(1e-5);
  });

  it('batch-first attention: the [N, H, T, T] softmax is recordable with heads as features; means are 1/T per head', async () => {
    const model = join(LAYOUTS, 'attention-batch-first.onnx');
    const { softmax, attention } = index['attention-batch-first']!;
    const inspection = await inspectModel(model);
    const layer = inspection.layers.find((l) => l.name === softmax)!;
    expect(layer.shape).toEqual([2, 16, 16]);
    expect(layer.layout).toEqual({ kind: 'heads', featureAxis: 0, source: 'graph' });
    expect(layer.default).toBe(false);
    // the attention output after its projection and bias: tokens with the 2 heads, recorded by default
    expect(inspection.layers.find((l) => l.name === attention)!).toMatchObject({ default: true, layout: { kind: 'tokens', heads: 2 } });
    const out = join(tempFolder(), 'heads');
    await recordSnapshot({ model, stimuli: join(LAYOUTS, 'attention-batch-first-inputs.npy'), out, layers: softmax!, batch: 2, threads: 1 });
    const got = await read(openSnapshot(out), softmax!);
    expect(maxRelativeError(got.values, npy(join(LAYOUTS, 'softmax.npy')).data)).toBeLessThan(1e-4);
    expect(got.means.length).toBe(2 * 2);
    for (const m of got.means) expect(m).toBeCloseTo(1 / 16, 6);
    expect(maxRelativeError(got.means, npy(join(LAYOUTS, 'softmax_means.npy')).data)).toBeLessThan(1e-5);
  });
});
