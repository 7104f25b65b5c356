/**
 * `windowSpatialProfiles` on a recorded pair: a uniform gain of 1.5 inside a box window (left half of the
 * map) at relu0 of a small bias-free network. At the site the modulated map is exactly 1.5·a inside the
 * box and a outside, so (exact property) a ring lying wholly inside the box changes by 0.5, a ring wholly
 * outside by 0, and every ring equals the direct computation √(Σ_inside (0.5·a)²) / √(Σ a²) over its
 * positions, with the rings of the module comment (six equal widths to the farthest map corner).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { windowSpatialProfiles } from '../../src/compare/spatial-profiles.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, concatActivations, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

describe('windowSpatialProfiles', () => {
  it('windowSpatialProfiles: a boxed uniform gain of 1.5 changes the site by 0.5 inside, 0 outside, and each ring as computed directly', async () => {
    const dir = tempFolder();
    const model = join(dir, 'net.onnx');
    writeFileSync(model, buildTinyNet({ input: [3, 16, 16], widths: [4, 6], bias: false }));
    const { npy, labels } = writeStimuliNpy(dir, [6, 3, 16, 16]);
    const base = await recordSnapshot({ model, stimuli: npy, labels, out: join(dir, 'base') });
    const spec = join(dir, 'spec.json');
    writeFileSync(spec, JSON.stringify({ site: 'relu0', kind: 'uniform', strength: 1.5, window: { shape: 'box', x0: 0, x1: 0.5, y0: 0, y1: 1, outside: 1 } }));
    const mod = await recordModulated({ model, stimuli: npy, labels, out: join(dir, 'mod'), modulate: spec, from: base.folder });
    const profiles = (await windowSpatialProfiles(openSnapshot(base.folder), openSnapshot(mod.folder)))!;
    expect(profiles.site).toBe('relu0');
    expect(profiles.centre).toEqual({ x: 0.25, y: 0.5 });
    const site = profiles.layers.find((l) => l.layer === 'relu0')!;
    expect(site.stimuli).toBe(6);
    // direct computation at the site from the baseline's own activations
    const a = await concatActivations(openSnapshot(base.folder).readLayer('relu0'));
    const [C, H, W] = [4, 16, 16];
    const outer = Math.hypot(0.75, 0.5);
    const diff2 = new Float64Array(6);
    const base2 = new Float64Array(6);
    for (let n = 0; n < 6; n++) {
      for (let c = 0; c < C; c++) {
        for (let i = 0; i < H; i++) {
          for (let j = 0; j < W; j++) {
            const x = (j + 0.5) / W;
            const y = (i + 0.5) / H;
            const ring = Math.min(5, Math.floor((Math.hypot(x - 0.25, y - 0.5) / outer) * 6));
            const v = a[((n * C + c) * H + i) * W + j]!;
            base2[ring] += v * v;
            if (x < 0.5) diff2[ring] += 0.25 * v * v;
          }
        }
      }
    }
    site.rings.forEach((r, k) => {
      if (base2[k]! > 0) expect(r.relativeChange).toBeCloseTo(Math.sqrt(diff2[k]!) / Math.sqrt(base2[k]!), 5);
    });
    // ring 0 (within 0.15 of the centre) lies inside the box; ring 5 (beyond 0.75) lies outside it
    expect(site.rings[0]!.relativeChange).toBeCloseTo(0.5, 5);
    expect(site.rings[5]!.relativeChange).toBe(0);
    // no window: no profile
    expect(await windowSpatialProfiles(openSnapshot(base.folder), openSnapshot(base.folder))).toBeNull();
  }, 120_000);
});
