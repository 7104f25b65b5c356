/**
 * Colours of a search display. The background has a random mid-range luminance and a slight tint; every
 * object (glyph, decoy or clutter fragment) gets an "ink" drawn the same way, so colour says nothing
 * about what an object is: its luminance differs from the background's by ± `contrast` (sign at random),
 * plus a random per-channel chroma offset.
 */
import type { Random } from '../../random.js';

/** An RGB triple in [0, 1]. */
export type Rgb = readonly [number, number, number];

/** Range of the background's mean luminance. */
const BACKGROUND_LUMINANCE: readonly [number, number] = [0.3, 0.7];
/** Peak per-channel tint of the background. */
const BACKGROUND_TINT = 0.08;
/** Peak per-channel chroma offset of an ink. */
const INK_CHROMA = 0.2;
/** An ink's contrast varies between this fraction of `contrast` and the full value. */
const CONTRAST_FLOOR = 0.6;

/** Draws a background base colour. */
export function sampleBackgroundColour(random: Random): Rgb {
  const luminance = BACKGROUND_LUMINANCE[0] + (BACKGROUND_LUMINANCE[1] - BACKGROUND_LUMINANCE[0]) * random.uniform();
  const r = luminance + BACKGROUND_TINT * (2 * random.uniform() - 1);
  const g = luminance + BACKGROUND_TINT * (2 * random.uniform() - 1);
  const b = luminance + BACKGROUND_TINT * (2 * random.uniform() - 1);
  return [clamp01(r), clamp01(g), clamp01(b)];
}

/**
 * Draws an ink for an object on `background`: mean background luminance ± contrast·U(0.6, 1), with a
 * random chroma offset, clamped to [0, 1]. `contrast` 0 gives inks at the background's luminance
 * (objects then differ from the background only in chroma).
 */
export function sampleInk(random: Random, background: Rgb, contrast: number): Rgb {
  const sign = random.uniform() < 0.5 ? -1 : 1;
  const offset = sign * contrast * (CONTRAST_FLOOR + (1 - CONTRAST_FLOOR) * random.uniform());
  const mean = (background[0] + background[1] + background[2]) / 3;
  const r = mean + offset + INK_CHROMA * (2 * random.uniform() - 1);
  const g = mean + offset + INK_CHROMA * (2 * random.uniform() - 1);
  const b = mean + offset + INK_CHROMA * (2 * random.uniform() - 1);
  return [clamp01(r), clamp01(g), clamp01(b)];
}

function clamp01(value: number): number {
  return value < 0 ? 0 : value > 1 ? 1 : value;
}
