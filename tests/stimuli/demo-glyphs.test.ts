import { describe, expect, it } from 'vitest';
import { DEMO_KINDS, GLYPH_EXTENT, glyphShape, isDemoKind } from '../../src/stimuli/demo/glyphs.js';
import { createCanvas, paintShape } from '../../src/stimuli/demo/raster.js';

// Exact areas of the glyphs in their unit frame (radius 1), from elementary geometry:
// annulus π(1 − a²); two crossed 2×2w rectangles 2·(2·2w) − (2w)²; equilateral triangle inscribed in the unit
// circle 3√3/4; square side 2s → 4s²; star polygon with n points, outer radius R, inner r: n·R·r·sin(π/n);
// crescent = unit disc − (lens of the unit circle and a circle of radius ρ at distance d), lens area by the
// standard circle–circle intersection formula.
function lensArea(r1: number, r2: number, d: number): number {
  const a1 = r1 * r1 * Math.acos((d * d + r1 * r1 - r2 * r2) / (2 * d * r1));
  const a2 = r2 * r2 * Math.acos((d * d + r2 * r2 - r1 * r1) / (2 * d * r2));
  const k = 0.5 * Math.sqrt((-d + r1 + r2) * (d + r1 - r2) * (d - r1 + r2) * (d + r1 + r2));
  return a1 + a2 - k;
}
const EXACT_AREA: Record<(typeof DEMO_KINDS)[number], number> = {
  disc: Math.PI,
  ring: Math.PI * (1 - 0.55 * 0.55),
  cross: 2 * (2 * 0.56) - 0.56 * 0.56,
  triangle: (3 * Math.sqrt(3)) / 4,
  square: 4 * 0.72 * 0.72,
  bar: 2 * 0.56,
  star: 5 * 1 * 0.42 * Math.sin(Math.PI / 5),
  crescent: Math.PI - lensArea(1, 0.8, 0.5),
};

/** Summed coverage of a glyph painted at `radius` pixels, in unit-frame area. */
function paintedArea(kind: (typeof DEMO_KINDS)[number], radius: number, angle: number): number {
  const size = Math.ceil(2 * radius * GLYPH_EXTENT) + 4;
  const canvas = createCanvas(size, size);
  const covered = paintShape(canvas, glyphShape(kind), { centreX: size / 2, centreY: size / 2, radius, angle }, [1, 1, 1], GLYPH_EXTENT);
  return covered / (radius * radius);
}

describe('glyph shapes', () => {
  for (const kind of DEMO_KINDS) {
    it(`paintShape(${kind}) covers the glyph's exact area within 1% at radius 24 px`, () => {
      // supersampling error is bounded by the boundary length over the 1/4-pixel sample spacing: < 1% here
      expect(Math.abs(paintedArea(kind, 24, 0.3) / EXACT_AREA[kind] - 1)).toBeLessThan(0.01);
    });
    it(`paintShape(${kind}) area does not depend on rotation (±1%)`, () => {
      const a = paintedArea(kind, 16, 0);
      for (const angle of [0.7, 1.9, 4.1]) expect(Math.abs(paintedArea(kind, 16, angle) / a - 1)).toBeLessThan(0.01);
    });
  }

  it('glyphShape(kind) stays inside GLYPH_EXTENT for every kind', () => {
    for (const kind of DEMO_KINDS) {
      const shape = glyphShape(kind);
      for (let k = 0; k < 720; k++) {
        const angle = (k / 720) * 2 * Math.PI;
        expect(shape(GLYPH_EXTENT * 1.0001 * Math.cos(angle), GLYPH_EXTENT * 1.0001 * Math.sin(angle))).toBe(false);
      }
    }
  });

  it('glyphShape(ring) has a hole and glyphShape(disc) has none', () => {
    expect(glyphShape('ring')(0, 0)).toBe(false);
    expect(glyphShape('disc')(0, 0)).toBe(true);
    expect(glyphShape('crescent')(0.3, 0)).toBe(false);
  });

  it('isDemoKind(name) accepts the eight kinds and nothing else', () => {
    expect(DEMO_KINDS).toHaveLength(8);
    for (const kind of DEMO_KINDS) expect(isDemoKind(kind)).toBe(true);
    expect(isDemoKind('Disc')).toBe(false);
    expect(isDemoKind('')).toBe(false);
  });
});

describe('paintShape', () => {
  it('paintShape(...) blends colour in proportion to coverage and leaves outside pixels alone', () => {
    const canvas = createCanvas(16, 16);
    canvas.data.fill(0.5);
    paintShape(canvas, glyphShape('disc'), { centreX: 8, centreY: 8, radius: 4, angle: 0 }, [1, 0, 0.25], GLYPH_EXTENT);
    const plane = 256;
    expect(canvas.data[8 * 16 + 8]).toBe(1); // fully covered centre pixel takes the colour exactly
    expect(canvas.data[plane + 8 * 16 + 8]).toBe(0);
    expect(canvas.data[2 * plane + 8 * 16 + 8]).toBe(0.25);
    expect(canvas.data[0]).toBe(0.5); // far corner untouched
    // an edge pixel is a convex mix of the old value and the colour
    const edge = canvas.data[5 * 16 + 5]!; // pixel [5, 6)²: its corner (5, 5) lies 4.24 px from the centre, (6, 6) 2.83 px
    expect(edge).toBeGreaterThan(0.5);
    expect(edge).toBeLessThan(1);
  });

  it('paintShape(...) clips a shape hanging off the canvas and returns 0 for one entirely off it', () => {
    const canvas = createCanvas(8, 8);
    const off = paintShape(canvas, glyphShape('disc'), { centreX: -20, centreY: 4, radius: 3, angle: 0 }, [1, 1, 1], GLYPH_EXTENT);
    expect(off).toBe(0);
    const half = paintShape(canvas, glyphShape('disc'), { centreX: 0, centreY: 4, radius: 3, angle: 0 }, [1, 1, 1], GLYPH_EXTENT);
    // half the disc of area π·9 lies on the canvas (exact symmetry), within supersampling error
    expect(Math.abs(half / ((Math.PI * 9) / 2) - 1)).toBeLessThan(0.05);
  });
});
