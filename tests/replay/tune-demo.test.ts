import { existsSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { inspectModel } from '../../src/record/inspect-model.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { loadModulationTables } from '../../src/replay/modulation-tables.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { openSnapshot, type Snapshot } from '../../src/snapshot/snapshot.js';
import { DEMO_KINDS, makeStimulusSet } from '../../src/stimuli/demo/index.js';
import { tempFolder } from '../helpers/onnx-builder.js';

const MODEL = 'models/demo/glyphnet.onnx';
const present = existsSync(MODEL);
const title = present ? 'tuning-based gain on the demo network' : `tuning-based gain on the demo network (skipped: ${MODEL} is not committed yet)`;

async function logits(snap: Snapshot, name: string): Promise<Float32Array> {
  const out = new Float32Array(snap.manifest.stimuli.count * DEMO_KINDS.length);
  for await (const batch of snap.readLayer(name)) {
    for (let r = 0; r < batch.rows; r++) out.set(batch.activation!.subarray(r * DEMO_KINDS.length, (r + 1) * DEMO_KINDS.length), batch.index[r]! * DEMO_KINDS.length);
  }
  return out;
}

describe.skipIf(!present)(title, () => {
  it('a tuning-based gain toward a kind at the last convolutional stage raises that kind\'s logit on displays containing it, for every kind', async () => {
    // Feature-similarity gain (Treue & Martinez-Trujillo 1999; DOMAIN.md): channels that prefer the
    // attended kind are scaled up, the others down; the readout of the attended kind should rise where
    // the kind is present. A sign check, one per kind, on 96 seeded displays.
    const dir = tempFolder();
    const stimuli = join(dir, 'stimuli');
    await makeStimulusSet({ out: stimuli, count: 96, seed: 515, format: 'npy' });
    const npy = join(stimuli, 'stimuli.npy');
    const labels = join(stimuli, 'labels.csv');
    const inspection = await inspectModel(MODEL);
    const maps = inspection.layers.filter((l) => l.op === 'Relu' && l.shape.length === 3);
    const site = maps[maps.length - 1]!.name; // the last convolutional stage's ReLU output
    const readout = inspection.model.outputs[0]!;
    const base = await recordSnapshot({ model: MODEL, stimuli: npy, labels, out: join(dir, 'base'), layers: `${site}+${readout}`, batch: 32, threads: 1 });
    const tuningPath = join(dir, 'tuning.arrow');
    await tuneSnapshot({ snapshot: base.folder, layers: site, out: tuningPath });
    const tables = loadModulationTables({ tuning: tuningPath });
    const baseSnap = openSnapshot(base.folder);
    const before = await logits(baseSnap, readout);
    const K = DEMO_KINDS.length;
    for (const [c, kind] of DEMO_KINDS.entries()) {
      if (!tables.categories.includes(kind)) continue;
      const spec = join(dir, `${kind}.json`);
      writeFileSync(spec, JSON.stringify({ site, kind: 'tuning', target: kind, strength: 0.5 }));
      const mod = await recordModulated({ model: MODEL, stimuli: npy, labels, out: join(dir, `mod-${kind}`), modulate: spec, from: base.folder, tables: tables.tables, categories: tables.categories, batch: 32, threads: 1 });
      const after = await logits(openSnapshot(mod.folder), readout);
      let change = 0;
      let n = 0;
      baseSnap.stimuli.labels.forEach((own, s) => {
        if (!own.includes(kind)) return;
        change += after[s * K + c]! - before[s * K + c]!;
        n++;
      });
      expect(n, kind).toBeGreaterThan(0);
      expect(change / n, `mean change of the ${kind} logit on displays containing ${kind}`).toBeGreaterThan(0);
    }
  });
});
