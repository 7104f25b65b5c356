/**
 * Options of the demo search-display generator, their defaults and their validation. Every option has
 * a default, so `{}` describes a valid one-display set; `resolveDisplayOptions` fills the gaps and
 * rejects out-of-range values with a `UsageError` that names the option, the value and the range.
 */
import { UsageError, closestHint } from '../../errors.js';
import { DEMO_KINDS, type DemoKind, isDemoKind } from './glyphs.js';

/** Width and height of every display, in pixels. */
export const DISPLAY_SIZE = 64;

/** Version of the generator's drawing rules; bump it whenever the same options would draw different pixels. */
export const GENERATOR_VERSION = 1;

/** Small clutter fragments in a display at clutter level 1 (the count scales linearly with the level). */
export const MAX_SMALL_FRAGMENTS = 28;

/** Background texture amplitude at clutter level 1 (scales linearly with the level). */
export const MAX_TEXTURE_AMPLITUDE = 0.22;

/** What to draw. All fields are optional; the defaults are listed beside each. */
export interface DemoDisplayOptions {
  /** Seed of the whole set, an integer in [0, 2³²). Default 0. */
  seed?: number;
  /** Displays in the set. Only the cued plan depends on it; default 1 (2 when `cued` is set). */
  count?: number;
  /** Glyph kinds that may appear (a non-empty subset of DEMO_KINDS, no repeats). Default: all eight. */
  kinds?: readonly DemoKind[];
  /** Clutter level in [0, 1]: scales the number of small fragments and the background texture. Default 0.6. */
  clutter?: number;
  /** Standard deviation of the Gaussian pixel noise, in intensity units, in [0, 1]. Default 0.18. */
  noise?: number;
  /** Luminance contrast of objects against the background, in [0, 1]. Default 0.26. */
  contrast?: number;
  /** Range [min, max] of glyph radii in pixels, 2 ≤ min ≤ max ≤ 16. Default [4.5, 8.5]. */
  glyphRadius?: readonly [number, number];
  /** Most glyphs in one display (1–3; at least one is always drawn). Default 3. */
  maxGlyphs?: number;
  /** Make a cued-detection set for this kind (half the displays contain it), or null. Default null. */
  cued?: DemoKind | null;
}

/** `DemoDisplayOptions` with every field present and checked. */
export interface ResolvedDisplayOptions {
  seed: number;
  count: number;
  kinds: readonly DemoKind[];
  clutter: number;
  noise: number;
  contrast: number;
  glyphRadius: readonly [number, number];
  maxGlyphs: number;
  cued: DemoKind | null;
}

/** The defaults, for documentation and for `set.json`. */
export const DEFAULT_DISPLAY_OPTIONS: Readonly<Omit<ResolvedDisplayOptions, 'count'>> = {
  seed: 0,
  kinds: DEMO_KINDS,
  clutter: 0.6,
  noise: 0.18,
  contrast: 0.26,
  glyphRadius: [4.5, 8.5],
  maxGlyphs: 3,
  cued: null,
};

function fail(option: string, value: unknown, hint: string): never {
  throw new UsageError('E_STIMULI_OPTION', `stimulus option ${option} = ${JSON.stringify(value)} is not valid`, { hint });
}

function checkRange(option: string, value: number, low: number, high: number): number {
  if (!Number.isFinite(value) || value < low || value > high) fail(option, value, `use a number between ${low} and ${high}`);
  return value;
}

/**
 * Fills in defaults and validates.
 * @throws UsageError (E_STIMULI_OPTION) for an unknown or repeated kind, a value out of range, a
 *   non-integer seed or count, a cued kind missing from `kinds`, or an odd count in a cued set
 *   (exactly half the displays must contain the cued kind).
 */
export function resolveDisplayOptions(options: DemoDisplayOptions = {}): ResolvedDisplayOptions {
  const d = DEFAULT_DISPLAY_OPTIONS;
  const seed = options.seed ?? d.seed;
  if (!Number.isInteger(seed) || seed < 0 || seed > 0xffffffff) fail('seed', seed, 'use an integer between 0 and 4294967295');
  const kinds = options.kinds ?? d.kinds;
  if (kinds.length === 0) fail('kinds', kinds, `name at least one of ${DEMO_KINDS.join(', ')}`);
  const seen = new Set<string>();
  for (const kind of kinds) {
    if (!isDemoKind(kind)) fail('kinds', kind, `${closestHint(kind, DEMO_KINDS)}; kinds are ${DEMO_KINDS.join(', ')}`);
    if (seen.has(kind)) fail('kinds', kind, 'name each kind once');
    seen.add(kind);
  }
  const cued = options.cued ?? d.cued;
  if (cued !== null) {
    if (!isDemoKind(cued)) fail('cued', cued, `${closestHint(cued, DEMO_KINDS)}; kinds are ${DEMO_KINDS.join(', ')}`);
    if (!kinds.includes(cued)) fail('cued', cued, `the cued kind must be one of the kinds drawn (${kinds.join(', ')})`);
  }
  const count = options.count ?? (cued === null ? 1 : 2);
  if (!Number.isInteger(count) || count < 1) fail('count', count, 'use a positive integer');
  if (cued !== null && count % 2 !== 0) fail('count', count, `a cued set needs an even count (half with ${cued}, half without); use ${count + 1}`);
  const glyphRadius = options.glyphRadius ?? d.glyphRadius;
  if (glyphRadius.length !== 2) fail('glyphRadius', glyphRadius, 'give [min, max] in pixels');
  checkRange('glyphRadius[0]', glyphRadius[0], 2, 16);
  checkRange('glyphRadius[1]', glyphRadius[1], glyphRadius[0], 16);
  const maxGlyphs = options.maxGlyphs ?? d.maxGlyphs;
  if (!Number.isInteger(maxGlyphs) || maxGlyphs < 1 || maxGlyphs > 3) fail('maxGlyphs', maxGlyphs, 'use 1, 2 or 3');
  return {
    seed,
    count,
    kinds: [...kinds],
    clutter: checkRange('clutter', options.clutter ?? d.clutter, 0, 1),
    noise: checkRange('noise', options.noise ?? d.noise, 0, 1),
    contrast: checkRange('contrast', options.contrast ?? d.contrast, 0, 1),
    glyphRadius: [glyphRadius[0], glyphRadius[1]],
    maxGlyphs,
    cued,
  };
}
