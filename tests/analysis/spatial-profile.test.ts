/**
 * Spatial profile of a change, checked on exact properties: a uniform gain g changes every ring by
 * exactly |g − 1|; a change at one position shows only in the ring holding that position's distance
 * from the centre; rings cover [0, the largest pixel distance] in equal widths.
 */
import { describe, expect, it } from 'vitest';
import { SpatialProfileAccumulator } from '../../src/analysis/spatial-profile.js';

function map(channels: number, height: number, width: number, f: (c: number, i: number, j: number) => number): Float32Array {
  const out = new Float32Array(channels * height * width);
  // CHW: i = (c*H + h)*W + w
  for (let c = 0; c < channels; c++) for (let i = 0; i < height; i++) for (let j = 0; j < width; j++) out[(c * height + i) * width + j] = f(c, i, j);
  return out;
}

describe('SpatialProfileAccumulator', () => {
  it('SpatialProfileAccumulator: a uniform gain of 1.25 is a relative change of exactly 0.25 in every ring', () => {
    const acc = new SpatialProfileAccumulator(3, 8, 10, 0.3, 0.5, 5);
    for (let n = 0; n < 4; n++) {
      const a = map(3, 8, 10, (c, i, j) => 1 + c + 0.1 * i + 0.01 * j + n);
      acc.add(a, a.map((v) => 1.25 * v));
    }
    const rings = acc.result();
    expect(rings).toHaveLength(5);
    for (const r of rings) if (r.positions > 0) expect(r.relativeChange).toBeCloseTo(0.25, 6);
    expect(rings.reduce((s, r) => s + r.positions, 0)).toBe(4 * 3 * 8 * 10);
  });

  it('SpatialProfileAccumulator: a change at one position appears only in the ring of its distance', () => {
    const acc = new SpatialProfileAccumulator(1, 10, 10, 0.5, 0.5, 4);
    const a = map(1, 10, 10, () => 1);
    const b = a.slice();
    b[0] = 3; // pixel (0, 0): the farthest from the centre
    acc.add(a, b);
    const rings = acc.result();
    expect(rings[3]!.relativeChange).toBeGreaterThan(0);
    for (const r of rings.slice(0, 3)) expect(r.relativeChange).toBe(0);
    // largest distance: pixel centre (0.05, 0.05) from (0.5, 0.5)
    expect(rings[3]!.to).toBeCloseTo(Math.hypot(0.45, 0.45), 12);
    expect(rings[0]!.from).toBe(0);
  });

  it('SpatialProfileAccumulator(…, outer): rings split [0, outer]; positions beyond it count in the last ring', () => {
    const acc = new SpatialProfileAccumulator(1, 4, 4, 0.5, 0.5, 2, 2);
    acc.add(new Float32Array(16).fill(1), new Float32Array(16).fill(2));
    const rings = acc.result();
    expect(rings.map((r) => [r.from, r.to])).toEqual([[0, 1], [1, 2]]);
    // every pixel centre lies within 1 of the centre: all in the first ring
    expect(rings[0]!.positions).toBe(16);
    expect(Number.isNaN(rings[1]!.relativeChange)).toBe(true);
  });
});
