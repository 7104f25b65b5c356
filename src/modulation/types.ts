/**
 * Types of the modulation layer: the validated spec a user writes (`ModulationSpec`), the context a
 * model supplies to resolve it (`ResolveContext`) and the resolved numbers the injected graph inputs
 * are filled from (`ResolvedModulation`). Type metadata only; parsing lives in `spec.ts`, resolution in
 * `resolve.ts`, tensor filling in `inputs.ts`.
 *
 * Every modulation becomes `y = x * G + B` at its site tensor, where G (gain) and B (offset) are extra
 * model inputs shaped `[N, C, 1, 1]`, or `[N, C, H, W]` when a spatial window is used.
 */

/** The modulation kinds a spec may name. */
export const MODULATION_KINDS = ['gain', 'uniform', 'offset', 'lesion', 'noise', 'tuning', 'sensitivity'] as const;

/** One of `MODULATION_KINDS`. */
export type ModulationKind = (typeof MODULATION_KINDS)[number];

/**
 * A rectangle in map-relative coordinates (0–1; x runs along the width axis, y along the height axis;
 * the centre of pixel (row i, column j) is at x = (j + 0.5)/W, y = (i + 0.5)/H). A position is inside
 * when x0 ≤ x < x1 and y0 ≤ y < y1 (half-open, so adjacent boxes tile a map without overlap); inside
 * the weight is 1, outside 0.
 */
export interface BoxWindow {
  shape: 'box';
  x0: number;
  x1: number;
  y0: number;
  y1: number;
  /** Gain applied outside the window (weight 0). Default 1. */
  outside: number;
}

/**
 * A Gaussian bump in map-relative coordinates: weight w = exp(−d² / 2σ²) with
 * d² = (x − cx)² + (y − cy)², distances measured in the same relative units on both axes (so on a
 * non-square map the bump is elliptical in pixels).
 */
export interface GaussianWindow {
  shape: 'gaussian';
  cx: number;
  cy: number;
  sigma: number;
  /** Gain applied where the weight is 0 (far from the centre). Default 1. */
  outside: number;
}

/**
 * A spatial window on any modulation kind. With weight w ∈ [0, 1] at a position, the injected inputs
 * are G = outside + w·(g − outside) and B = w·b, where g and b are the modulation's own gain and offset.
 */
export type SpatialWindow = BoxWindow | GaussianWindow;

/** Keys every modulation kind accepts. */
interface ModulationCommon {
  /** ONNX tensor name of the site. */
  site: string;
  /** Optional spatial window; absent means spatially global. */
  window?: SpatialWindow;
  /** Negative gains (values, `uniform` strength, window `outside`, clamped noise) are errors unless true. */
  allowNegative: boolean;
}

/** Explicit per-channel gain vector. */
export interface GainModulation extends ModulationCommon {
  kind: 'gain';
  /** One gain per channel. */
  values: number[];
  /** Absolute path of the `.npy`/`.csv` the values came from; absent for inline lists. Provenance only. */
  valuesFile?: string;
}

/** One gain for every channel (spec key `gain`; older specs `strength`, same meaning). */
export interface UniformModulation extends ModulationCommon {
  kind: 'uniform';
  /** The gain applied to all channels (not 1 + β as for the sweep's uniform scheme). */
  strength: number;
}

/** Additive per-channel offset vector (gain stays 1). Negative offsets are always allowed. */
export interface OffsetModulation extends ModulationCommon {
  kind: 'offset';
  /** One offset per channel. */
  values: number[];
  /** Absolute path of the `.npy`/`.csv` the values came from; absent for inline lists. Provenance only. */
  valuesFile?: string;
}

/** Lesion of an explicit channel list: those channels get gain exactly 0. */
export interface LesionListModulation extends ModulationCommon {
  kind: 'lesion';
  /** Distinct channel indices, in the order written. */
  channels: number[];
}

/** Lesion of the `top` channels with the highest (normalised) table value for `target`. */
export interface LesionTopModulation extends ModulationCommon {
  kind: 'lesion';
  /** How many channels to silence (≥ 1). */
  top: number;
  /** Category whose table values rank the channels. */
  target: string;
  /** Which table ranks the channels. Default `tuning`. */
  rankBy: 'tuning' | 'sensitivity';
}

/** Either form of lesion. */
export type LesionModulation = LesionListModulation | LesionTopModulation;

/** Seeded Gaussian noise, drawn independently per stimulus and channel (and position when windowed). */
export interface NoiseModulation extends ModulationCommon {
  kind: 'noise';
  /** `multiplicative`: G = 1 + sd·z; `additive`: B = sd·z. Default `multiplicative`. */
  mode: 'multiplicative' | 'additive';
  /** Standard deviation of the noise (≥ 0). */
  sd: number;
  /** Seed; a non-negative 32-bit integer or a non-empty string. Default 0. */
  seed: number | string;
}

/** Feature-similarity gain from a table: g_k = max(0, 1 + β·v_k) for the `target` category. */
export interface TableGainModulation extends ModulationCommon {
  kind: 'tuning' | 'sensitivity';
  /** Attended category. */
  target: string;
  /** β, the strength of the modulation (any finite number; negative attends away). */
  strength: number;
}

/** One validated modulation: a discriminated union on `kind`. */
export type Modulation =
  | GainModulation
  | UniformModulation
  | OffsetModulation
  | LesionModulation
  | NoiseModulation
  | TableGainModulation;

/** A validated spec file. */
export interface ModulationSpec {
  /** The file path (or label) the spec was read from; prefixes every message. */
  source: string;
  /** `single`: the file held one modulation object; `list`: it held `{ modulations: [...] }`. */
  form: 'single' | 'list';
  /** At least one modulation, sites distinct. */
  modulations: Modulation[];
  /** One line per key that is valid but easy to misread (a uniform modulation's `strength`, which is the gain itself); commands print them. */
  notices?: string[];
}

/** Shape of a site tensor as the resolver needs it. */
export interface SiteShape {
  /** Size of the channel axis (axis 1). */
  channels: number;
  /** Height of the map; 1 for `[N, C]` vectors. */
  height: number;
  /** Width of the map; 1 for `[N, C]` vectors. */
  width: number;
}

/** Looks up one site's table values for one category, or undefined when the table has none. */
export type TableLookup = (site: string, category: string) => Float64Array | undefined;

/** What a model (and optional tuning/sensitivity tables) tells the resolver. */
export interface ResolveContext {
  /** Every tensor that can be modulated, with its shape. */
  sites: ReadonlyMap<string, SiteShape>;
  /** Category names, in table order; needed by the `tuning`, `sensitivity` kinds and `lesion` with `top`. */
  categories?: readonly string[];
  /** Tables of per-channel values, one vector of length C per (site, category). */
  tables?: { tuning?: TableLookup; sensitivity?: TableLookup };
  /** Every recordable tensor name, for "closest:" hints. */
  siteNames: readonly string[];
}

/** Noise settings carried into input filling. */
export interface NoiseSettings {
  mode: 'multiplicative' | 'additive';
  sd: number;
  seed: number | string;
}

/** A modulation turned into numbers for one site. */
export interface ResolvedModulation {
  site: string;
  kind: ModulationKind;
  channels: number;
  height: number;
  width: number;
  /** True when G and B must be `[N, C, H, W]` (a window is set); otherwise `[N, C, 1, 1]`. */
  spatial: boolean;
  /** Per-channel gain g_k before window and noise, `[C]`. */
  gain: Float32Array;
  /** Per-channel offset b_k before window and noise, `[C]`. */
  offset: Float32Array;
  /** Window weights `[H*W]` (row-major: i = h*W + w), or null when spatially global. */
  window: Float32Array | null;
  /** Gain where the window weight is 0; 1 without a window. */
  outside: number;
  /** Noise drawn per stimulus, or null. */
  noise: NoiseSettings | null;
  /** Whether multiplicative noise may drive a gain below 0 (otherwise it is clamped at 0). */
  allowNegative: boolean;
  /** One line for manifests and logs. */
  description: string;
  /** JSON-able resolved form for the snapshot manifest: the actual vectors, window, seeds. */
  source: ResolvedModulationRecord;
}

/** The JSON-able record of a resolved modulation (what a snapshot manifest stores). */
export interface ResolvedModulationRecord {
  site: string;
  kind: ModulationKind;
  shape: { channels: number; height: number; width: number };
  /** The gain vector actually fed (float32 values as numbers). */
  gain: number[];
  /** The offset vector actually fed. */
  offset: number[];
  window: SpatialWindow | null;
  outside: number;
  noise: NoiseSettings | null;
  allowNegative: boolean;
  /** Kind-specific details: target, strength, lesioned channels, values file. */
  details: Record<string, string | number | boolean | number[]>;
}
