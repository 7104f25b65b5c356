/**
 * The display composer: turns resolved options and a display index into pixels and labels. Display i of a
 * set is drawn only from `createRandom(seed).fork(setLabel).fork(i)` (the set label separates free sets from
 * the cued sets of each kind), so any display can be regenerated alone and a set can be made in shards.
 * Drawing order: textured background, half the small clutter, the glyphs and decoys, the other half of the
 * clutter (which may occlude glyphs), Gaussian pixel noise; then values are clamped to [0, 1] and rounded to
 * multiples of 1/255, so a PNG and a float array of the same display hold the same numbers.
 */
import { createRandom, type Random } from '../../random.js';
import { paintBackground } from './background.js';
import { sampleDecoy, sampleSmallFragment, type Fragment } from './clutter.js';
import { chooseDistinct, planCuedSet, shuffleInPlace, type DisplayPlan } from './cued-plan.js';
import { DEMO_KINDS, GLYPH_EXTENT, glyphShape, type DemoKind } from './glyphs.js';
import { DISPLAY_SIZE, MAX_SMALL_FRAGMENTS, MAX_TEXTURE_AMPLITUDE, resolveDisplayOptions, type DemoDisplayOptions, type ResolvedDisplayOptions } from './options.js';
import { sampleBackgroundColour, sampleInk } from './palette.js';
import { createCanvas, paintShape, type Canvas } from './raster.js';
import { UsageError } from '../../errors.js';

/** One rendered display. */
export interface Display {
  /** CHW float32, [3, 64, 64], values k/255 in [0, 1]. */
  pixels: Float32Array;
  /** Kinds present, each once, in DEMO_KINDS order. */
  labels: DemoKind[];
}

/** A prepared set: options resolved and (for a cued set) the plan built once. */
export interface DisplaySet {
  readonly options: ResolvedDisplayOptions;
  /** Renders display `index` (0 ≤ index < options.count). @throws UsageError for an index out of range. */
  render(index: number): Display;
}

/** Chance that a free (uncued) display holds one decoy fragment. */
const FREE_DECOY_PROBABILITY = 0.5;
/** Attempts to place an object without overlapping the ones already placed, before accepting an overlap. */
const PLACEMENT_TRIES = 40;
/** Gap (pixels) kept between the bounding circles of glyphs and decoys. */
const OBJECT_GAP = 1;

/**
 * Prepares a set for rendering.
 * @throws UsageError when the options are invalid (see resolveDisplayOptions).
 */
export function createDisplaySet(options: DemoDisplayOptions = {}): DisplaySet {
  const resolved = resolveDisplayOptions(options);
  const root = createRandom(resolved.seed).fork(resolved.cued === null ? 'free' : `cued:${resolved.cued}`);
  const plans = resolved.cued === null ? null : planCuedSet(root.fork('plan'), resolved.count, resolved.kinds, resolved.cued, resolved.maxGlyphs);
  return {
    options: resolved,
    render(index: number): Display {
      if (!Number.isInteger(index) || index < 0 || index >= resolved.count) {
        throw new UsageError('E_STIMULI_OPTION', `display index ${index} is outside the set (count ${resolved.count})`, {
          hint: `use an integer from 0 to ${resolved.count - 1}`,
        });
      }
      const random = root.fork(index);
      const plan = plans === null ? planFreeDisplay(random.fork('plan'), resolved) : plans[index]!;
      return composeDisplay(random, plan, resolved);
    },
  };
}

/**
 * Renders display `index` of the set the options describe. For a cued set this rebuilds the set's plan
 * (O(count), cheap); to render many displays, use createDisplaySet once.
 * @throws UsageError for invalid options or an index outside [0, count).
 */
export function renderDisplay(options: DemoDisplayOptions, index: number): Display {
  return createDisplaySet(options).render(index);
}

function planFreeDisplay(random: Random, options: ResolvedDisplayOptions): DisplayPlan {
  const n = 1 + random.int(Math.min(options.maxGlyphs, options.kinds.length));
  const substitute = random.uniform() < FREE_DECOY_PROBABILITY;
  return { kinds: chooseDistinct(random, options.kinds, n), substitute };
}

interface PlacedObject {
  kind: DemoKind | 'decoy';
  centreX: number;
  centreY: number;
  radius: number;
}

function composeDisplay(random: Random, plan: DisplayPlan, options: ResolvedDisplayOptions): Display {
  const size = DISPLAY_SIZE;
  const canvas = createCanvas(size, size);
  const background = sampleBackgroundColour(random.fork('background-colour'));
  paintBackground(canvas, random.fork('background'), { base: background, amplitude: MAX_TEXTURE_AMPLITUDE * options.clutter });

  const clutterRandom = random.fork('clutter');
  const smallCount = Math.round(MAX_SMALL_FRAGMENTS * options.clutter);
  const paintFragments = (n: number): void => {
    for (let k = 0; k < n; k++) {
      const fragment = sampleSmallFragment(clutterRandom, size, size);
      paintFragment(canvas, fragment, sampleInk(clutterRandom, background, options.contrast));
    }
  };
  paintFragments(Math.floor(smallCount / 2));

  const objectRandom = random.fork('objects');
  const objects = placeObjects(objectRandom, plan, options);
  for (const object of objects) {
    const ink = sampleInk(objectRandom, background, options.contrast);
    const angle = 2 * Math.PI * objectRandom.uniform();
    if (object.kind === 'decoy') {
      paintFragment(canvas, sampleDecoy(objectRandom, object.centreX, object.centreY, object.radius), ink);
    } else {
      paintShape(canvas, glyphShape(object.kind), { centreX: object.centreX, centreY: object.centreY, radius: object.radius, angle }, ink, GLYPH_EXTENT);
    }
  }
  paintFragments(smallCount - Math.floor(smallCount / 2));

  const pixels = finishPixels(canvas, random.fork('noise'), options.noise);
  const labels = DEMO_KINDS.filter((kind) => plan.kinds.includes(kind));
  return { pixels, labels };
}

function paintFragment(canvas: Canvas, fragment: Fragment, ink: readonly [number, number, number]): void {
  paintShape(canvas, fragment.shape, fragment.placement, ink, fragment.extent);
}

/** Sizes and positions glyphs and decoys, keeping them apart where it can; order is shuffled with the kinds. */
function placeObjects(random: Random, plan: DisplayPlan, options: ResolvedDisplayOptions): PlacedObject[] {
  const kinds: Array<DemoKind | 'decoy'> = [...plan.kinds];
  if (plan.substitute) kinds.push('decoy');
  shuffleInPlace(random, kinds); // who gets placed first (and so finds free space) must not depend on kind
  const [low, high] = options.glyphRadius;
  const placed: PlacedObject[] = [];
  for (const kind of kinds) {
    const radius = low + (high - low) * random.uniform();
    const margin = radius * GLYPH_EXTENT;
    let centreX = 0;
    let centreY = 0;
    for (let attempt = 0; attempt < PLACEMENT_TRIES; attempt++) {
      centreX = margin + (DISPLAY_SIZE - 2 * margin) * random.uniform();
      centreY = margin + (DISPLAY_SIZE - 2 * margin) * random.uniform();
      let clear = true;
      for (const other of placed) {
        const reach = (radius + other.radius) * GLYPH_EXTENT + OBJECT_GAP;
        const dx = centreX - other.centreX;
        const dy = centreY - other.centreY;
        if (dx * dx + dy * dy < reach * reach) clear = false;
      }
      if (clear) break;
    }
    placed.push({ kind, centreX, centreY, radius });
  }
  return placed;
}

/** Adds noise, clamps to [0, 1] and rounds to k/255, into a fresh Float32Array. */
function finishPixels(canvas: Canvas, random: Random, noise: number): Float32Array {
  const source = canvas.data;
  const pixels = new Float32Array(source.length);
  if (noise > 0) {
    for (let i = 0; i < source.length; i++) pixels[i] = quantise(source[i]! + noise * random.normal());
  } else {
    for (let i = 0; i < source.length; i++) pixels[i] = quantise(source[i]!);
  }
  return pixels;
}

/** Clamps to [0, 1] and rounds to the nearest k/255. */
function quantise(value: number): number {
  const clamped = value < 0 ? 0 : value > 1 ? 1 : value;
  return Math.round(clamped * 255) / 255;
}
