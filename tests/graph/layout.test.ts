import { describe, expect, it } from 'vitest';
import { featureFirstOrder, featureMeans, inferTokenGrid, layoutFromShape, layoutGeometry, spatialGrid } from '../../src/graph/layout.js';

// Exact arithmetic properties of the index rule element = (o·F + f)·I + i (no outside source needed:
// the means are of small integers, exact in float32).
describe('tensor layouts', () => {
  it('averages tokens over positions with features on the last axis', () => {
    const data = new Float32Array([1, 2, 3, 4, 5, 6, 10, 20, 30, 40, 50, 60]); // 2 rows of T = 2, D = 3
    const g = layoutGeometry([2, 3], { kind: 'tokens', featureAxis: 1, source: 'graph' });
    expect(g).toEqual({ outer: 2, features: 3, inner: 1 });
    expect(Array.from(featureMeans(data, 2, g))).toEqual([2.5, 3.5, 4.5, 25, 35, 45]);
  });
  it('keeps the channels-first rule of older snapshots', () => {
    const data = new Float32Array([1, 3, 5, 7]); // C = 2, H·W = 2
    expect(layoutFromShape([2, 1, 2]).featureAxis).toBe(0);
    expect(Array.from(featureMeans(data, 1, layoutGeometry([2, 1, 2])))).toEqual([2, 6]);
  });
  it('handles channels-last maps and a feature axis in the middle', () => {
    const hwc = new Float32Array([1, 10, 2, 20, 3, 30, 4, 40]); // H = 2, W = 2, C = 2
    expect(Array.from(featureMeans(hwc, 1, layoutGeometry([2, 2, 2], { kind: 'channels-last', featureAxis: 2, source: 'sidecar' })))).toEqual([2.5, 25]);
    const mid = new Float32Array([1, 2, 3, 4, 5, 6, 7, 8]); // [2, 2, 2], feature axis 1
    expect(Array.from(featureMeans(mid, 1, layoutGeometry([2, 2, 2], { kind: 'channels-first', featureAxis: 1, source: 'sidecar' })))).toEqual([(1 + 2 + 5 + 6) / 4, (3 + 4 + 7 + 8) / 4]);
  });
  it('finds the patch grid of a token count', () => {
    expect(inferTokenGrid(197)).toEqual({ prefix: 1, height: 14, width: 14 });
    expect(inferTokenGrid(16)).toEqual({ prefix: 0, height: 4, width: 4 });
    expect(inferTokenGrid(17)).toEqual({ prefix: 1, height: 4, width: 4 });
    expect(inferTokenGrid(3)).toBeNull();
    expect(spatialGrid([64, 8, 8])).toEqual({ prefix: 0, height: 8, width: 8 });
  });
  it('featureFirstOrder puts each feature\'s positions in one run and leaves channels-first rows as they are', () => {
    const tokens = new Float32Array([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12]); // 2 rows of T = 2, D = 3: [t][f]
    const g = layoutGeometry([2, 3], { kind: 'tokens', featureAxis: 1, source: 'graph' });
    expect(Array.from(featureFirstOrder(tokens, 2, g))).toEqual([1, 4, 2, 5, 3, 6, 7, 10, 8, 11, 9, 12]);
    const maps = new Float32Array([1, 2, 3, 4]);
    expect(featureFirstOrder(maps, 1, layoutGeometry([2, 2]))).toBe(maps);
  });
});
