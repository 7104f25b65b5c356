/**
 * scoreGains (src/replay/gain-scores.ts): patterns per runtime call bounded by the run bytes give the
 * same readouts as the default grouping (rows are computed independently: common practice, the
 * runtime's kernels loop over the batch outside the arithmetic), and pattern 0 at gain 1 is the
 * baseline's own readout (x·1 + 0 = x in IEEE arithmetic).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { scoreGains } from '../../src/replay/gain-scores.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

describe('scoreGains', () => {
  it('scoreGains with a run-bytes budget of one pattern per call equals the default grouping, and gain 1 reproduces the baseline readout', async () => {
    const dir = tempFolder('sonde-gain-scores-');
    const model = join(dir, 'net.onnx');
    writeFileSync(model, buildTinyNet({ bias: true, seed: 23, classes: 3 }));
    const stim = writeStimuliNpy(dir, [7, 3, 16, 16], 9);
    const base = await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base'), batch: 3, threads: 1 });
    const loaded = loadModel(model);
    const inspection = await inspectModel(loaded);
    const snapshot = openSnapshot(base.folder);
    const C = snapshot.layer('relu1').shape[0]!;
    const gains = Array.from({ length: 5 }, (_, p) => [Float32Array.from({ length: C }, (_, k) => (p === 0 ? 1 : 0.5 + ((p * 7 + k * 3) % 11) / 10))]);
    const options = { model: loaded, inspection, baseline: snapshot, sites: ['relu1'], gains, readout: 'logits', threads: 1 };
    const grouped = await scoreGains(options);
    const single = await scoreGains({ ...options, runBytes: 1 });
    grouped.forEach((scores, p) => expect(Array.from(single[p]!), `pattern ${p}`).toEqual(Array.from(scores)));
    const recorded = await snapshot.readChannelMeans('logits');
    expect(Array.from(grouped[0]!, Math.fround)).toEqual(Array.from(recorded));
  });
});
