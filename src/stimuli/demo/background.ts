/**
 * Textured backgrounds for search displays: a flat base colour plus two octaves of smooth value noise
 * (random values on a coarse lattice, interpolated with a smoothstep), mostly in luminance with a weaker
 * colour component. The texture has no orientation and no periodic structure.
 */
import type { Random } from '../../random.js';
import type { Canvas } from './raster.js';

/** How a background is drawn. */
export interface BackgroundStyle {
  /** Flat base colour, three values in [0, 1]. */
  base: readonly [number, number, number];
  /** Peak deviation of the texture from the base, in intensity units (0 gives a flat background). */
  amplitude: number;
}

/** Lattice spacings (pixels) of the two noise octaves and their relative weights. */
const OCTAVES: ReadonlyArray<{ cell: number; weight: number }> = [
  { cell: 16, weight: 0.6 },
  { cell: 5, weight: 0.4 },
];
/** Share of the texture that varies per channel rather than in luminance. */
const CHROMA_SHARE = 0.3;

/**
 * Fills `canvas` with the base colour plus texture drawn from `random`. Every call draws the same number
 * of variates for a given canvas size, so later draws from `random` do not depend on `style`.
 * Values may leave [0, 1] slightly; the display composer clamps at the end.
 */
export function paintBackground(canvas: Canvas, random: Random, style: BackgroundStyle): void {
  const { width, height, data } = canvas;
  const plane = width * height;
  for (let c = 0; c < 3; c++) data.fill(style.base[c]!, c * plane, (c + 1) * plane);
  for (const octave of OCTAVES) {
    const columns = Math.ceil(width / octave.cell) + 1;
    const rows = Math.ceil(height / octave.cell) + 1;
    const lattice = new Float64Array(4 * columns * rows); // [luminance, r, g, b] per lattice node
    for (let i = 0; i < lattice.length; i++) lattice[i] = 2 * random.uniform() - 1;
    const lumWeight = style.amplitude * octave.weight * (1 - CHROMA_SHARE);
    const chromaWeight = style.amplitude * octave.weight * CHROMA_SHARE;
    for (let y = 0; y < height; y++) {
      const gy = (y + 0.5) / octave.cell;
      const row = Math.floor(gy);
      const ty = smoothstep(gy - row);
      for (let x = 0; x < width; x++) {
        const gx = (x + 0.5) / octave.cell;
        const column = Math.floor(gx);
        const tx = smoothstep(gx - column);
        const n00 = 4 * (row * columns + column); // lattice layout: i = 4*(row*columns + column) + component
        const n01 = n00 + 4;
        const n10 = n00 + 4 * columns;
        const n11 = n10 + 4;
        const luminance = lerp2(lattice, n00, n01, n10, n11, tx, ty);
        const i = y * width + x;
        for (let c = 0; c < 3; c++) {
          const chroma = lerp2(lattice, n00 + 1 + c, n01 + 1 + c, n10 + 1 + c, n11 + 1 + c, tx, ty);
          data[c * plane + i] = data[c * plane + i]! + lumWeight * luminance + chromaWeight * chroma;
        }
      }
    }
  }
}

function smoothstep(t: number): number {
  return t * t * (3 - 2 * t);
}

function lerp2(values: Float64Array, a: number, b: number, c: number, d: number, tx: number, ty: number): number {
  const top = values[a]! + (values[b]! - values[a]!) * tx;
  const bottom = values[c]! + (values[d]! - values[c]!) * tx;
  return top + (bottom - top) * ty;
}
