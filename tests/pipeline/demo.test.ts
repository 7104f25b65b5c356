import { existsSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { signFlipTest } from '../../src/analysis/sign-flip.js';
import { runDemo } from '../../src/pipeline/demo.js';
import { tempFolder } from '../helpers/onnx-builder.js';

describe('runDemo', () => {
  it('runDemo({ quick }) writes every artefact and gives the same headline figures twice with the same seed', async () => {
    const a = await runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 });
    const b = await runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 });
    for (const key of ['baseline', 'tuning', 'sensitivity', 'sweep', 'agreement', 'diff-early', 'diff-late', 'report']) expect(existsSync(a.files[key]!), key).toBe(true);
    expect(a.headline).toEqual(b.headline);
    expect(a.summary).toEqual(b.summary);
    expect(a.sweep.cells.map((c) => c.change.dPrime)).toEqual(b.sweep.cells.map((c) => c.change.dPrime));
    const html = readFileSync(a.files.report!, 'utf8');
    expect((html.match(/<svg/g) ?? []).length).toBeGreaterThanOrEqual(4);
    expect(html).not.toMatch(/<script/i);
    // strength 0 reproduces the baseline read-out exactly, in every scheme
    for (const cell of a.sweep.cells.filter((c) => c.strength === 0)) expect(cell.mod).toEqual(cell.base);
  }, 120_000);

  it('runDemo compares tuning-based gain with the shuffled control by an exact sign-flip test across cued kinds, recomputable from the cells', async () => {
    const demo = await runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 });
    const control = demo.sweep.control!;
    const differences = demo.sweep.categories.map((category) => {
      const mean = (scheme: string) => {
        const cells = demo.sweep.cells.filter((c) => c.category === category && c.scheme === scheme && c.strength !== 0);
        return cells.reduce((s, c) => s + c.change.dPrime, 0) / cells.length;
      };
      return mean('tuning') - mean('shuffled');
    });
    // Fisher's randomisation test (sign flips of paired differences), recomputed here from the cells
    const test = signFlipTest(differences);
    expect(control.difference).toBeCloseTo(test.mean, 12);
    expect(control.pValue).toBe(test.pValue);
    expect(control.test).toMatch(/sign-flip/);
  }, 120_000);
});
