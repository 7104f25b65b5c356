import { existsSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { signFlipTest } from '../../src/stats/sign-flip.js';
import { runDemo, type DemoResult } from '../../src/demo/demo.js';
import { tempFolder } from '../helpers/onnx-builder.js';

// one quick run shared by the tests (each run takes seconds on a loaded machine); the first test adds a second
let shared: Promise<DemoResult> | null = null;
const quickDemo = (): Promise<DemoResult> => (shared ??= runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 }));

describe('runDemo', () => {
  it('runDemo({ quick }) writes every artefact and gives the same headline figures twice with the same seed', async () => {
    const a = await quickDemo();
    const b = await runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 });
    for (const key of ['baseline', 'baseline-heldout', 'tuning', 'sensitivity', 'sweep', 'comparison', 'agreement', 'diff-early', 'diff-late', 'report']) expect(existsSync(a.files[key]!), key).toBe(true);
    expect(a.headline).toEqual(b.headline);
    expect(a.summary).toEqual(b.summary);
    expect(a.sweep.cells.map((c) => c.change.dPrime)).toEqual(b.sweep.cells.map((c) => c.change.dPrime));
    const html = readFileSync(a.files.report!, 'utf8');
    expect((html.match(/<svg/g) ?? []).length).toBeGreaterThanOrEqual(4);
    expect(html).not.toMatch(/<script/i);
    expect(html).toMatch(/Schemes at one size of modulation \(held out\)/);
    // strength 0 reproduces the baseline read-out exactly, in every scheme
    for (const cell of a.sweep.cells.filter((c) => c.strength === 0)) expect(cell.mod).toEqual(cell.base);
  }, 120_000);

  it('runDemo compares tuning-based gain with the shuffled control by an exact sign-flip test across cued kinds, recomputable from the cells', async () => {
    const demo = await quickDemo();
    const control = demo.sweep.control!;
    // the measure the control is computed in (d′ before the threshold-free measures, else the one it names)
    const measure = (control as { measure?: string }).measure === 'auc' ? 'auc' : 'dPrime';
    const differences = demo.sweep.categories.map((category) => {
      const mean = (scheme: string) => {
        const cells = demo.sweep.cells.filter((c) => c.category === category && c.scheme === scheme && c.strength !== 0);
        return cells.reduce((s, c) => s + (c.change as unknown as Record<string, number>)[measure]!, 0) / cells.length;
      };
      return mean('tuning') - mean('shuffled');
    });
    // Fisher's randomisation test (sign flips of paired differences), recomputed here from the cells
    const test = signFlipTest(differences);
    expect(control.difference).toBeCloseTo(test.mean, 12);
    expect(control.pValue).toBe(test.pValue);
    expect(control.test).toMatch(/sign-flip/);
  }, 120_000);

  it('runDemo measures detection on a held-out set and compares every scheme at the same size of site modulation', async () => {
    const demo = await quickDemo();
    const c = demo.comparison;
    // gains from one stimulus set, detection on another (the tables record their source snapshot)
    expect(demo.sweep.evaluation!.heldOut).toBe(true);
    expect(demo.sweep.evaluation!.detectionOn).toBe(demo.files['baseline-heldout']);
    expect(c.heldOut).toBe(true);
    expect(c.fitSet).toBe(demo.files.baseline);
    for (const scheme of ['tuning', 'sensitivity', 'shuffled', 'ceiling']) for (const site of demo.sites) expect(c.effects.some((e) => e.scheme === scheme && e.site === site), `${scheme} at ${site}`).toBe(true);
    const all = c.effects.find((e) => e.scheme === 'tuning-all')!;
    expect(all.site.split('+').length).toBeGreaterThan(demo.sites.length);
    for (const e of c.effects) {
      // the schemes are scaled to the target size (bisection); the ceiling is fitted inside it
      const target = e.site.includes('+') ? c.size / e.site.split('+').length : c.size;
      if (e.scheme === 'ceiling') expect(e.size).toBeLessThanOrEqual(target + 1e-6);
      else expect(e.size, `${e.scheme} at ${e.site}`).toBeCloseTo(target, 6);
      expect(e.aucChange.low).toBeLessThanOrEqual(e.aucChange.estimate);
      expect(e.aucChange.high).toBeGreaterThanOrEqual(e.aucChange.estimate);
      // the estimate is the mean over cued kinds of the per-kind changes
      expect(e.aucChange.estimate).toBeCloseTo(e.perCategory.reduce((s, p) => s + p.aucChange, 0) / e.perCategory.length, 12);
    }
    for (const v of c.versusShuffled) {
      const [t, sh] = v.site.includes('+') ? ['tuning-all', 'shuffled-all'] : ['tuning', 'shuffled'];
      const row = (scheme: string) => c.effects.find((e) => e.scheme === scheme && e.site === v.site)!;
      expect(v.difference.estimate).toBeCloseTo(row(t).aucChange.estimate - row(sh).aucChange.estimate, 12);
    }
    expect(demo.summary.join('\n')).toMatch(/held-out evaluation/);
  }, 120_000);
});
