/**
 * The demo scenario: cluttered search displays of glyphs. 64×64 RGB images on a textured background
 * hold 1–3 glyphs of eight kinds at random positions, sizes, rotations and colours, among clutter
 * fragments and pixel noise; a display's label is the set of kinds present. Cued-detection sets hold the
 * cued kind in exactly half the displays.
 */
export { DEMO_KINDS, GLYPH_EXTENT, glyphShape, isDemoKind, type DemoKind, type UnitShape } from './glyphs.js';
export {
  DEFAULT_DISPLAY_OPTIONS,
  DISPLAY_SIZE,
  GENERATOR_VERSION,
  resolveDisplayOptions,
  type DemoDisplayOptions,
  type ResolvedDisplayOptions,
} from './options.js';
export { createDisplaySet, renderDisplay, type Display, type DisplaySet } from './display.js';
export { planCuedSet, type DisplayPlan } from './cued-plan.js';
export {
  STIMULUS_FORMATS,
  encodePng,
  imagePath,
  makeStimulusSet,
  npyFloat32Header,
  type StimulusFormat,
  type StimulusSetDescription,
  type StimulusSetOptions,
  type StimulusSetSummary,
} from './writer.js';
