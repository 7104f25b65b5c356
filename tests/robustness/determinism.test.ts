/**
 * Determinism: the same inputs recorded twice with one runtime thread give identical layer files (same
 * bytes, so the same SHA-256 in the manifest); with two threads the activations stay within 1e-6
 * relative of the one-thread values (reassociated float32 sums differ in the last bits; bound: common
 * practice for float32 reductions of this size).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, concatActivations, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };

beforeAll(() => {
  dir = tempFolder('sonde-det-');
  model = join(dir, 'net.onnx');
  // wide enough that the runtime actually splits convolutions across threads
  writeFileSync(model, buildTinyNet({ bias: true, widths: [32, 48, 64], input: [3, 32, 32], seed: 4 }));
  stimuli = writeStimuliNpy(dir, [24, 3, 32, 32], 8);
});

async function record(name: string, threads: number) {
  return recordSnapshot({ model, stimuli: stimuli.npy, labels: stimuli.labels, out: join(dir, name), layers: 'all', batch: 8, threads });
}

describe('recording determinism', () => {
  it('recordSnapshot with threads 1 twice gives byte-identical layer files; threads 2 stays within 1e-6 relative', async () => {
    const a = await record('a', 1);
    const b = await record('b', 1);
    const c = await record('c', 2);
    expect(a.manifest.layers.length).toBeGreaterThan(8);
    for (let i = 0; i < a.manifest.layers.length; i++) {
      expect(b.manifest.layers[i]!.sha256, a.manifest.layers[i]!.name).toBe(a.manifest.layers[i]!.sha256);
    }
    expect(b.manifest.stimuli.digest).toBe(a.manifest.stimuli.digest);
    const one = openSnapshot(a.folder);
    const two = openSnapshot(c.folder);
    let worst = 0;
    for (const layer of one.manifest.layers) {
      const left = await concatActivations(one.readLayer(layer.name));
      const right = await concatActivations(two.readLayer(layer.name));
      expect(right.length).toBe(left.length);
      let scale = 0;
      for (const v of left) scale = Math.max(scale, Math.abs(v));
      for (let i = 0; i < left.length; i++) {
        // relative to the value, with a floor of 1e-3 of the layer's largest magnitude for values near 0
        const relative = Math.abs(right[i]! - left[i]!) / Math.max(Math.abs(left[i]!), 1e-3 * scale, Number.MIN_VALUE);
        worst = Math.max(worst, relative);
      }
    }
    expect(worst).toBeLessThanOrEqual(1e-6);
  }, 60_000);
});
