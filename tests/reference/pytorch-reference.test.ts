/**
 * Sonde's recordings and modulated recordings against PyTorch forward hooks (fixtures made by
 * tests/reference/make_fixtures.py with Debian's python3-torch; see tests/reference/README.md).
 * Error measure: max |sonde − torch| / max |torch| per tensor, limit 1e-4 (issue contract).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot, type Snapshot } from '../../src/snapshot/snapshot.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { tempFolder } from '../helpers/onnx-builder.js';
import { maxRelativeError } from '../helpers/max-relative-error.js';

const FIXTURES = new URL('./fixtures/', import.meta.url).pathname;
const MODELS = ['residual', 'branching', 'homogeneous', 'gated'] as const;

interface Mapping {
  tensors: Array<{ module: string; onnx: string; shape: number[]; file: string }>;
}

function npy(path: string): Float32Array {
  return parseNpy(readFileSync(path), path).data as Float32Array;
}

async function layerValues(snap: Snapshot, name: string): Promise<Float32Array> {
  const { elements } = snap.layerGeometry(name);
  const out = new Float32Array(snap.manifest.stimuli.count * elements);
  for await (const batch of snap.readLayer(name)) out.set(batch.activation!, batch.index[0]! * elements);
  return out;
}


describe('recordSnapshot vs PyTorch forward hooks', () => {
  for (const model of MODELS) {
    it(`recordSnapshot(${model}.onnx) matches the PyTorch activations of ${model} within 1e-4`, async () => {
      const mapping = JSON.parse(readFileSync(join(FIXTURES, model, 'mapping.json'), 'utf8')) as Mapping;
      const out = join(tempFolder(), 'snap');
      const names = mapping.tensors.map((t) => t.onnx);
      await recordSnapshot({ model: join(FIXTURES, `${model}.onnx`), stimuli: join(FIXTURES, 'inputs.npy'), out, layerNames: names, batch: 3, threads: 1 });
      const snap = openSnapshot(out);
      expect(snap.manifest.layers.map((l) => l.name).sort()).toEqual([...names].sort());
      for (const tensor of mapping.tensors) {
        const want = npy(join(FIXTURES, tensor.file));
        const got = await layerValues(snap, tensor.onnx);
        expect(snap.layer(tensor.onnx).shape, tensor.module).toEqual(tensor.shape.slice(1));
        expect(maxRelativeError(got, want), `${model} ${tensor.module}`).toBeLessThanOrEqual(1e-4);
      }
    });
  }

  it('the default selector records every activation, pooling, merge and output tensor the fixtures map (residual)', async () => {
    const mapping = JSON.parse(readFileSync(join(FIXTURES, 'residual', 'mapping.json'), 'utf8')) as Mapping;
    const out = join(tempFolder(), 'snap');
    await recordSnapshot({ model: join(FIXTURES, 'residual.onnx'), stimuli: join(FIXTURES, 'inputs.npy'), out, batch: 4, threads: 1 });
    const recorded = new Set(openSnapshot(out).manifest.layers.map((l) => l.name));
    for (const tensor of mapping.tensors) expect(recorded.has(tensor.onnx), tensor.onnx).toBe(true);
  });
});

describe('recordModulated vs a PyTorch hook that multiplies a module output by a per-channel gain', () => {
  for (const model of ['residual', 'branching'] as const) {
    it(`recordModulated(${model}) matches the PyTorch modulated logits and downstream tensors within 1e-4, with tail replay`, async () => {
      const folder = join(FIXTURES, model, 'modulated');
      const site = JSON.parse(readFileSync(join(folder, 'site.json'), 'utf8')) as { site: string; tensors: Array<{ onnx: string; file: string }> };
      const gain = Array.from(npy(join(folder, 'gain.npy')));
      const dir = tempFolder();
      const specPath = join(dir, 'gain.json');
      writeFileSync(specPath, JSON.stringify({ site: site.site, kind: 'gain', values: gain }));
      const names = [site.site, ...site.tensors.map((t) => t.onnx)];
      const base = join(dir, 'base');
      await recordSnapshot({ model: join(FIXTURES, `${model}.onnx`), stimuli: join(FIXTURES, 'inputs.npy'), out: base, layers: 'default', batch: 2, threads: 1 });
      const result = await recordModulated({ model: join(FIXTURES, `${model}.onnx`), stimuli: join(FIXTURES, 'inputs.npy'), out: join(dir, 'mod'), modulate: specPath, from: base, threads: 1 });
      expect(result.manifest.run.mode).toBe('tail');
      const snap = openSnapshot(result.folder);
      for (const tensor of site.tensors) {
        expect(names).toContain(tensor.onnx);
        const got = await layerValues(snap, tensor.onnx);
        expect(maxRelativeError(got, npy(join(folder, tensor.file))), `${model} ${tensor.onnx}`).toBeLessThanOrEqual(1e-4);
      }
    });
  }
});
