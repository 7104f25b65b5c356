/**
 * The numbers behind a pair's pictures agree with what `diff` computes from the same snapshots by its
 * own route (the ROC area by ranks over the readout, the signature fit at each layer), and the spatial
 * profile of a windowed gain falls with distance from the window's centre at the site (the weight
 * exp(−d²/2σ²) falls with d: exact for the site's own change up to the map's activity pattern, so only
 * the order of the nearest and farthest rings is checked).
 */
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { diffSnapshots } from '../../../src/compare/diff-snapshots.js';
import { runDemo, type DemoResult } from '../../../src/demo/demo.js';
import { readTuningTable } from '../../../src/snapshot/tables.js';
import { pairPictureData } from '../../../src/report/pictures/pair-pictures.js';
import { tempFolder } from '../../helpers/onnx-builder.js';

let demo: DemoResult;

describe('pairPictureData', () => {
  beforeAll(async () => {
    demo = await runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 });
  }, 400_000);

  it('pairPictureData: ROC areas and signature slopes equal those of diffSnapshots on the same pair', async () => {
    const base = demo.files['baseline-heldout']!;
    const mod = join(demo.folder, 'modulated-early');
    const data = await pairPictureData({ base, mod, tuning: demo.files.tuning! });
    const target = data.target!;
    const blocks = new Map(readTuningTable(demo.files.tuning!).blocks.map((b) => [b.layer, b]));
    const report = await diffSnapshots({
      base,
      mod,
      task: `detect:${target}`,
      target,
      bootstrap: 0,
      tuning: (layer) => {
        const block = blocks.get(layer);
        if (!block) return undefined;
        const k = block.categories.indexOf(target);
        return Float64Array.from({ length: block.channels }, (_, c) => block.tuning[c * block.categories.length + k]!);
      },
    });
    expect(data.roc).toHaveLength(1);
    expect(data.roc[0]!.baseAuc).toBeCloseTo(report.task!.auc.base, 12);
    expect(data.roc[0]!.modAuc).toBeCloseTo(report.task!.auc.mod, 12);
    expect(data.signature.length).toBeGreaterThan(0);
    for (const s of data.signature) {
      const row = report.layers.find((l) => l.name === s.layer)!;
      expect(s.slope).toBeCloseTo(row.signature!.slope, 9);
    }
    expect(data.stimuli.length).toBeGreaterThan(0);
    expect(data.featureMaps.map((m) => m.layer)[0]).toBe(data.site);
    expect(data.spatialProfile).toBeNull();
  }, 120_000);

  it('pairPictureData: the windowed run changes the site most near the window centre and least far from it', async () => {
    const data = await pairPictureData({ base: demo.files['baseline-heldout']!, mod: join(demo.folder, 'modulated-window') });
    expect(data.window?.shape).toBe('gaussian');
    const site = data.spatialProfile!.find((p) => p.layer === data.site)!;
    const finite = site.rings.filter((r) => Number.isFinite(r.relativeChange));
    expect(finite[0]!.relativeChange).toBeGreaterThan(10 * finite[finite.length - 1]!.relativeChange);
  }, 120_000);
});
