import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { parseReadout } from '../../src/replay/sense-plan.js';
import { buildTinyNet, tempFolder } from '../helpers/onnx-builder.js';

async function model(sidecar: unknown) {
  const dir = tempFolder();
  const path = join(dir, 'net.onnx');
  writeFileSync(path, buildTinyNet({ seed: 2, classes: 10, constants: true }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify(sidecar));
  const loaded = loadModel(path);
  return { loaded, inspection: await inspectModel(loaded) };
}

describe('parseReadout', () => {
  it('parseReadout without --readout reads the tensor the sidecar names, with its kinds', async () => {
    const kinds = Array.from({ length: 10 }, (_, i) => `k${i}`);
    const { loaded, inspection } = await model({ outputs: { name: 'flat', kinds: kinds.slice(0, 8) } });
    // flat has 8 units (the last conv width); logits (the first output) has 10
    const choice = parseReadout(undefined, loaded, inspection);
    expect(choice.tensor).toBe('flat');
    expect(choice.categories).toEqual(kinds.slice(0, 8));
  });

  it('parseReadout refuses a sidecar naming fewer kinds than the readout has units, in one line pointing to sonde heads', async () => {
    const { loaded, inspection } = await model({ outputs: { name: 'logits', kinds: ['ring', 'bar', 'dot', 'cross'] } });
    let error: (Error & { hint?: string }) | null = null;
    try {
      parseReadout(undefined, loaded, inspection);
    } catch (e) {
      error = e as Error & { hint?: string };
    }
    expect(error?.message).toMatch(/names 4 kinds \(ring, bar, dot, cross\) for the 10 units of "logits"/);
    expect(error?.hint).toMatch(/sonde heads/);
  });
});
