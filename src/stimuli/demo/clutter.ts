/**
 * Distractor clutter for search displays: pieces of contour that resemble parts of glyphs without
 * being one — straight strokes, circular arcs and corners (two strokes meeting at an angle). Small
 * fragments are scattered over the display; a glyph-sized fragment (a "decoy") stands in where a
 * glyph could have been, so the number of objects does not reveal whether a glyph kind is present.
 */
import type { Random } from '../../random.js';
import type { UnitShape } from './glyphs.js';
import type { Placement } from './raster.js';

/** A fragment ready to paint: its unit-frame shape, a bound on that shape, and where it goes. */
export interface Fragment {
  shape: UnitShape;
  /** Radius in unit-frame lengths that holds the whole shape. */
  extent: number;
  placement: Placement;
}

/** Small fragments: length (pixels) of a stroke, arc radius, arm length of a corner. */
const SMALL_LENGTH: readonly [number, number] = [2.5, 6];
/** Small fragments: stroke width in pixels. */
const SMALL_WIDTH: readonly [number, number] = [0.8, 1.6];
/** Decoys: stroke width relative to the decoy's radius (glyph arms are 0.56 of the radius wide). */
const DECOY_WIDTH: readonly [number, number] = [0.25, 0.45];

/** A straight stroke along u: |u| ≤ 1, |v| ≤ halfWidth. */
function strokeShape(halfWidth: number): UnitShape {
  return (u, v) => u >= -1 && u <= 1 && v >= -halfWidth && v <= halfWidth;
}

/** An arc of the unit circle of angular span `span` (radians, from angle 0), thickness `thickness` inwards. */
function arcShape(thickness: number, span: number): UnitShape {
  const inner2 = (1 - thickness) * (1 - thickness);
  return (u, v) => {
    const rho2 = u * u + v * v;
    if (rho2 > 1 || rho2 < inner2) return false;
    let angle = Math.atan2(v, u);
    if (angle < 0) angle += 2 * Math.PI;
    return angle <= span;
  };
}

/** Two strokes of unit length from the origin, one along +u and one at angle `opening`. */
function cornerShape(halfWidth: number, opening: number): UnitShape {
  const cos = Math.cos(opening);
  const sin = Math.sin(opening);
  return (u, v) => {
    if (u >= 0 && u <= 1 && v >= -halfWidth && v <= halfWidth) return true;
    const along = cos * u + sin * v;
    const across = -sin * u + cos * v;
    return along >= 0 && along <= 1 && across >= -halfWidth && across <= halfWidth;
  };
}

function between(random: Random, range: readonly [number, number]): number {
  return range[0] + (range[1] - range[0]) * random.uniform();
}

/** Picks one of the three fragment forms with the given relative pixel width. */
function sampleShape(random: Random, halfWidth: number): { shape: UnitShape; extent: number } {
  const form = random.int(3);
  if (form === 0) return { shape: strokeShape(halfWidth), extent: 1 + halfWidth };
  if (form === 1) {
    const span = (0.4 + 0.6 * random.uniform()) * Math.PI; // 72°–180°: never a closed ring
    return { shape: arcShape(Math.min(0.9, 2 * halfWidth), span), extent: 1 };
  }
  const opening = (0.33 + 0.25 * random.uniform()) * Math.PI; // 60°–105°: corners of triangles and squares
  return { shape: cornerShape(halfWidth, opening), extent: 1 + halfWidth };
}

/**
 * Draws one small clutter fragment placed uniformly over a width × height display (it may overlap
 * anything). Sizes are in pixels, independent of the glyph size.
 */
export function sampleSmallFragment(random: Random, width: number, height: number): Fragment {
  const radius = between(random, SMALL_LENGTH);
  const halfWidth = between(random, SMALL_WIDTH) / 2 / radius;
  const { shape, extent } = sampleShape(random, halfWidth);
  const placement = { centreX: width * random.uniform(), centreY: height * random.uniform(), radius, angle: 2 * Math.PI * random.uniform() };
  return { shape, extent, placement };
}

/**
 * Draws one glyph-sized decoy fragment centred at (centreX, centreY) with the given radius (pixels):
 * a stroke, arc or corner as thick as a glyph's parts, but not a whole glyph.
 */
export function sampleDecoy(random: Random, centreX: number, centreY: number, radius: number): Fragment {
  const halfWidth = between(random, DECOY_WIDTH) / 2;
  const { shape, extent } = sampleShape(random, halfWidth);
  return { shape, extent, placement: { centreX, centreY, radius, angle: 2 * Math.PI * random.uniform() } };
}
