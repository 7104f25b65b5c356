import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { channelWeights, fitSiteCeilings, gainSize } from '../../src/replay/ceiling.js';
import { scoreGains } from '../../src/replay/gain-scores.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { pairAuc } from '../helpers/pair-auc.js';

const kinds = ['alpha', 'beta', 'gamma'];
let dir: string;

async function setUp(name: string, bias: boolean, seed: number) {
  const folder = join(dir, name);
  const { mkdirSync } = await import('node:fs');
  mkdirSync(folder);
  const model = join(folder, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias, seed: 41, classes: 3 }));
  writeFileSync(join(folder, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
  const labels = Array.from({ length: 40 }, (_, i) => [kinds[i % 3]!, ...(i % 4 === 0 ? [kinds[(i + 1) % 3]!] : [])].join(';'));
  const stim = writeStimuliNpy(folder, [40, 3, 16, 16], seed, labels);
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(folder, 'base'), batch: 16, threads: 1 });
  const loaded = loadModel(model);
  return { model: loaded, inspection: await inspectModel(loaded), baseline: openSnapshot(join(folder, 'base')) };
}

beforeAll(() => {
  dir = tempFolder();
});

describe('scoreGains', () => {
  it('scoreGains with gain 1 reproduces the recorded logits, and gains at two sites multiply on a bias-free network (positive homogeneity, exact property)', async () => {
    const { model, inspection, baseline } = await setUp('homog', false, 5);
    const ones = (site: string) => new Float32Array(baseline.layerGeometry(site).channels).fill(1);
    const fill = (site: string, v: number) => new Float32Array(baseline.layerGeometry(site).channels).fill(v);
    const [same, scaled] = await scoreGains({ model, inspection, baseline, sites: ['relu0', 'relu2'], gains: [[ones('relu0'), ones('relu2')], [fill('relu0', 2), fill('relu2', 3)]], readout: 'logits', threads: 1 });
    const recorded = await baseline.readChannelMeans('logits');
    for (let i = 0; i < recorded.length; i++) {
      expect(same![i]).toBe(recorded[i]);
      expect(scaled![i]).toBeCloseTo(6 * recorded[i]!, 4);
    }
  });
});

describe('fitSiteCeilings', () => {
  it('fitSiteCeilings at the last ReLU (readout linear in its channel gains): the linearised ROC area equals the replayed one exactly, within the size budget, and not below the baseline where the step is chosen', async () => {
    const { model, inspection, baseline } = await setUp('linear', true, 9);
    const weights = await channelWeights(baseline, 'relu2');
    // without early stopping the kept step is the best on all fitting stimuli, so never below g = 1
    const ceilings = await fitSiteCeilings({ model, inspection, fit: baseline, site: 'relu2', categories: kinds, budget: () => 0.1, earlyStopping: false, threads: 1 });
    const scores = await scoreGains({ model, inspection, baseline, sites: ['relu2'], gains: ceilings.map((c) => [c.gain]), readout: 'logits', threads: 1 });
    ceilings.forEach((ceiling, c) => {
      expect(ceiling.derivatives).toBe('exact'); // gradient graph, not C + 1 replays
      const signal = baseline.stimuli.labels.map((l) => (l.includes(ceiling.category) ? 1 : 0));
      const column = Array.from({ length: 40 }, (_, i) => scores[c]![i * 3 + c]!);
      // gap → linear layer: the readout is affine in the gains, so the first-order expansion is exact
      expect(pairAuc(column, signal), ceiling.category).toBeCloseTo(ceiling.fit.linearAuc, 12);
      expect(ceiling.fit.linearAuc).toBeGreaterThanOrEqual(ceiling.fit.baseAuc);
      expect(gainSize(ceiling.gain, weights)).toBeLessThanOrEqual(0.1 + 1e-6);
      expect(ceiling.fit.size).toBeLessThanOrEqual(0.1 + 1e-9);
      expect(Number.isNaN(ceiling.fit.validationAuc)).toBe(true);
    });
    // the fits do move the gains (else the first check would hold trivially)
    expect(ceilings.some((c) => c.fit.size > 0.05 && c.fit.linearAuc > c.fit.baseAuc)).toBe(true);
    // early stopping (the default) keeps the step best on the held-back half; g = 1 (step 0) is a candidate
    for (const c of await fitSiteCeilings({ model, inspection, fit: baseline, site: 'relu2', categories: kinds, budget: () => 0.1, threads: 1 })) {
      expect(c.fit.validationAuc).toBeGreaterThanOrEqual(c.fit.validationBaseAuc);
      expect(gainSize(c.gain, weights)).toBeLessThanOrEqual(0.1 + 1e-6);
    }
  });
});
