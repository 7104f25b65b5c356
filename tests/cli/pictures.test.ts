/**
 * `sonde pictures` on a small recorded pair (a bias-free network, a boxed uniform gain at relu0): writes
 * one self-contained page with the picture kinds the pair can give, prints the spatial profile's numbers
 * with --json, and refuses in one line an existing --out without --force and a missing snapshot.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;

describe('sonde pictures', () => {
  beforeAll(async () => {
    dir = tempFolder();
    const model = join(dir, 'net.onnx');
    writeFileSync(model, buildTinyNet({ input: [3, 16, 16], widths: [4, 6], bias: false }));
    const { npy, labels } = writeStimuliNpy(dir, [6, 3, 16, 16]);
    await recordSnapshot({ model, stimuli: npy, labels, out: join(dir, 'base') });
    const spec = join(dir, 'spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu0', kind: 'uniform', gain: 1.5, window: { shape: 'gaussian', cx: 0.3, cy: 0.5, sigma: 0.2, outside: 1 } }));
    await recordModulated({ model, stimuli: npy, labels, out: join(dir, 'mod'), modulate: spec, from: join(dir, 'base') });
  }, 120_000);

  it('sonde pictures BASE MOD --out writes a page with stimuli, feature maps and the spatial profile; --json prints the profile', async () => {
    const out = join(dir, 'pictures.html');
    const result = await runSonde(['pictures', join(dir, 'base'), join(dir, 'mod'), '--out', out]);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stdout).toMatch(/^wrote .*pictures\.html \(\d+ KiB\): stimuli, feature-maps, spatial-profile/);
    const page = readFileSync(out, 'utf8');
    expect(page).toMatch(/data-picture="feature-maps"/);
    expect(page).toMatch(/<img class="raster" src="data:image\/png;base64,/);
    expect(page).not.toMatch(/<script/i);
    const json = await runSonde(['pictures', join(dir, 'base'), join(dir, 'mod'), '--out', out, '--force', '--json']);
    expect(json.code, json.stderr).toBe(0);
    const data = JSON.parse(json.stdout) as { site: string; window: { shape: string }; spatialProfile: Array<{ layer: string; rings: Array<{ relativeChange: number | null }> }> };
    expect(data.site).toBe('relu0');
    expect(data.window.shape).toBe('gaussian');
    const site = data.spatialProfile.find((l) => l.layer === 'relu0')!;
    // a uniform gain of 1.5 weighted by exp(−d²/2σ²): at most 0.5, largest near the centre
    expect(site.rings[0]!.relativeChange!).toBeLessThanOrEqual(0.5 + 1e-6);
    expect(site.rings[0]!.relativeChange!).toBeGreaterThan(site.rings[site.rings.length - 1]!.relativeChange ?? 0);
  }, 60_000);

  it('sonde pictures refuses an existing --out without --force, and a missing snapshot, in one line', async () => {
    const out = join(dir, 'taken.html');
    writeFileSync(out, 'x');
    const taken = await runSonde(['pictures', join(dir, 'base'), join(dir, 'mod'), '--out', out]);
    expect(taken.code).toBe(2);
    expect(taken.stderr.trim().split('\n')).toHaveLength(1);
    expect(readFileSync(out, 'utf8')).toBe('x');
    const missing = await runSonde(['pictures', join(dir, 'nowhere'), join(dir, 'mod'), '--out', join(dir, 'p2.html')]);
    expect(missing.code).not.toBe(0);
    expect(missing.stderr.trim().split('\n')).toHaveLength(1);
    expect(missing.stderr).toMatch(/nowhere/);
    expect(existsSync(join(dir, 'p2.html'))).toBe(false);
  }, 60_000);
});
