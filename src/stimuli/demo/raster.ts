/**
 * Anti-aliased painting of unit-frame shapes into a planar RGB canvas by supersampling: each pixel's
 * coverage is the fraction of a regular SUPERSAMPLE × SUPERSAMPLE grid of sample points inside the shape,
 * and the colour is blended over what is already there in proportion to that coverage.
 */
import type { UnitShape } from './glyphs.js';

/** Samples per pixel along each axis (16 per pixel: coverage steps of 1/16). */
export const SUPERSAMPLE = 4;

/** A planar RGB canvas: `data` is CHW, i = (c*height + y)*width + x, values nominally in [0, 1]. */
export interface Canvas {
  readonly width: number;
  readonly height: number;
  readonly data: Float64Array;
}

/** Where and how a unit-frame shape lands on the canvas (pixel units; y grows downwards). */
export interface Placement {
  /** Centre x in pixels (pixel i spans [i, i+1), its centre is i + 0.5). */
  centreX: number;
  /** Centre y in pixels. */
  centreY: number;
  /** Pixels per unit-frame length (the glyph's radius in pixels). */
  radius: number;
  /** Rotation in radians. */
  angle: number;
}

/** Allocates a width × height canvas filled with zeros. */
export function createCanvas(width: number, height: number): Canvas {
  return { width, height, data: new Float64Array(3 * width * height) };
}

/**
 * Paints `shape` at `placement` in `colour` (three values in [0, 1]) with the given opacity, blending
 * `new = old·(1 − α·coverage) + colour·α·coverage`. Only the pixels within `extent·radius` of the centre
 * are visited, so `extent` must bound the shape in its unit frame. Parts off the canvas are clipped.
 * Returns the summed coverage (in pixels), which is 0 when the shape lies entirely off the canvas.
 */
export function paintShape(
  canvas: Canvas,
  shape: UnitShape,
  placement: Placement,
  colour: readonly [number, number, number],
  extent: number,
  opacity = 1,
): number {
  const { width, height, data } = canvas;
  const reach = extent * placement.radius;
  const x0 = Math.max(0, Math.floor(placement.centreX - reach));
  const x1 = Math.min(width - 1, Math.ceil(placement.centreX + reach));
  const y0 = Math.max(0, Math.floor(placement.centreY - reach));
  const y1 = Math.min(height - 1, Math.ceil(placement.centreY + reach));
  // inverse transform: pixel offset (dx, dy) → unit frame (u, v) = R(−angle)·(dx, dy) / radius
  const cos = Math.cos(placement.angle) / placement.radius;
  const sin = Math.sin(placement.angle) / placement.radius;
  const step = 1 / SUPERSAMPLE;
  const samples = SUPERSAMPLE * SUPERSAMPLE;
  const plane = width * height;
  const [red, green, blue] = colour;
  let total = 0;
  for (let y = y0; y <= y1; y++) {
    for (let x = x0; x <= x1; x++) {
      let inside = 0;
      for (let sy = 0; sy < SUPERSAMPLE; sy++) {
        const dy = y + (sy + 0.5) * step - placement.centreY;
        for (let sx = 0; sx < SUPERSAMPLE; sx++) {
          const dx = x + (sx + 0.5) * step - placement.centreX;
          if (shape(cos * dx + sin * dy, -sin * dx + cos * dy)) inside++;
        }
      }
      if (inside === 0) continue;
      const coverage = inside / samples;
      total += coverage;
      const alpha = opacity * coverage;
      const i = y * width + x; // CHW: channel c at c*plane + i
      data[i] = data[i]! * (1 - alpha) + red * alpha;
      data[plane + i] = data[plane + i]! * (1 - alpha) + green * alpha;
      data[2 * plane + i] = data[2 * plane + i]! * (1 - alpha) + blue * alpha;
    }
  }
  return total;
}
