import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { describeEvaluation } from '../../src/replay/held-out.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { sweepModulations } from '../../src/replay/sweep.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { mkdirSync } from 'node:fs';

const kinds = ['alpha', 'beta', 'gamma'];
let dir: string;
let model: string;

beforeAll(async () => {
  dir = tempFolder();
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 3 }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
  const labels = Array.from({ length: 24 }, (_, i) => kinds[i % 3]!);
  for (const [name, seed] of [['a', 3], ['b', 4]] as const) {
    mkdirSync(join(dir, name));
    const stim = writeStimuliNpy(join(dir, name), [24, 3, 16, 16], seed, labels);
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, `base-${name}`), batch: 8, threads: 1 });
  }
  await tuneSnapshot({ snapshot: join(dir, 'base-a'), out: join(dir, 'tuning-a.arrow') });
});

describe('describeEvaluation', () => {
  it('describeEvaluation reads the tuning table\'s source snapshot and calls detection on another snapshot held out', () => {
    const other = describeEvaluation(join(dir, 'base-b'), { tuning: join(dir, 'tuning-a.arrow') });
    expect(other.tables[0]!.from).toBe(join(dir, 'base-a'));
    expect(other.heldOut).toBe(true);
    expect(describeEvaluation(join(dir, 'base-a'), { tuning: join(dir, 'tuning-a.arrow') }).heldOut).toBe(false);
    expect(describeEvaluation(join(dir, 'base-a'), {}).heldOut).toBeNull();
  });

  it('sweepModulations records in sweep.json whether the evaluation is held out', async () => {
    const common = { model, sites: ['relu1'], schemes: ['tuning'], strengths: [0, 0.5], task: 'detect:all', tuning: join(dir, 'tuning-a.arrow'), threads: 1 } as const;
    const held = await sweepModulations({ ...common, from: join(dir, 'base-b'), out: join(dir, 'sw-b') });
    expect(held.evaluation!.heldOut).toBe(true);
    expect(held.evaluation!.detectionOn).toBe(join(dir, 'base-b'));
    const written = JSON.parse(readFileSync(join(dir, 'sw-b', 'sweep.json'), 'utf8'));
    expect(written.evaluation.heldOut).toBe(true);
    const same = await sweepModulations({ ...common, from: join(dir, 'base-a'), out: join(dir, 'sw-a') });
    expect(same.evaluation!.heldOut).toBe(false);
  });
});
