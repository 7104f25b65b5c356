import { describe, expect, it } from 'vitest';
import { defaultSiteLayout, gainInputDims, siteGeometry, siteShapeOf } from '../../src/modulation/site-shape.js';

describe('siteShapeOf', () => {
  it('siteShapeOf([C, H, W]) is C features at H·W positions on an H×W grid (features first, as before layouts)', () => {
    const s = siteShapeOf([64, 7, 5])!;
    expect(s).toMatchObject({ features: 64, positions: 35, grid: { prefix: 0, height: 7, width: 5 } });
    expect(siteGeometry(s)).toEqual({ outer: 1, features: 64, inner: 35 });
  });

  it('siteShapeOf([197, 768]) of a ViT-B/16 residual stream is 768 features at 197 tokens, the class token before a 14×14 patch grid', () => {
    // ViT-B/16 at 224 px: (224 / 16)² = 196 patches plus the class token (common practice: torchvision vit_b_16)
    const s = siteShapeOf([197, 768])!;
    expect(s).toMatchObject({ features: 768, positions: 197, grid: { prefix: 1, height: 14, width: 14 } });
    expect(siteGeometry(s)).toEqual({ outer: 197, features: 768, inner: 1 });
    expect(defaultSiteLayout([197, 768]).featureAxis).toBe(1);
  });

  it('siteShapeOf(shape, layout) follows a declared layout (channels-last maps) and gives null without a feature axis', () => {
    const s = siteShapeOf([7, 5, 64], { kind: 'channels-last', featureAxis: 2, source: 'sidecar' })!;
    expect(s).toMatchObject({ features: 64, positions: 35, grid: { prefix: 0, height: 7, width: 5 } });
    expect(siteShapeOf([], { kind: 'scalar', featureAxis: null, source: 'shape' })).toBeNull();
  });
});

describe('gainInputDims', () => {
  it('gainInputDims(site, rows, spatial) sets every position axis to 1 unless spatial; shared sites have no rows axis', () => {
    expect(gainInputDims(siteShapeOf([64, 7, 5])!, 3, false)).toEqual([3, 64, 1, 1]);
    expect(gainInputDims(siteShapeOf([64, 7, 5])!, 3, true)).toEqual([3, 64, 7, 5]);
    expect(gainInputDims(siteShapeOf([197, 768])!, 3, false)).toEqual([3, 1, 768]);
    expect(gainInputDims(siteShapeOf([197, 768])!, 3, true)).toEqual([3, 197, 768]);
    expect(gainInputDims(siteShapeOf([394, 768], { kind: 'tokens', featureAxis: 1, source: 'graph' }, { shared: true })!, 3, false)).toEqual([1, 768]);
  });
});
