/**
 * Types of the modulation layer: the validated spec a user writes (`ModulationSpec`), the context a
 * model supplies to resolve it (`ResolveContext`) and the resolved numbers the injected graph inputs
 * are filled from (`ResolvedModulation`). Type metadata only; parsing lives in `spec.ts`, resolution in
 * `resolve.ts`, tensor filling in `inputs.ts`.
 *
 * Every modulation becomes `y = x * G + B` at its site tensor, where G (gain) and B (offset) are extra
 * model inputs shaped like the site with every position axis set to 1 (`[N, C, 1, 1]` for a feature
 * map, `[N, 1, D]` for a token tensor), or like the whole site (`[N, C, H, W]`, `[N, T, D]`) when a
 * window or a token selection makes the gain differ between positions. A site whose first axis is not
 * the batch (an attention output with batch and tokens merged, `[T·N, D]`) takes one G shared by every
 * stimulus, shaped `[1, D]`.
 */
import type { TensorLayout, TokenGrid } from '../graph/layout.js';

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

/**
 * One entry of a token selection: a token index (0 is the first token), `class` (the first token of a
 * site whose grid has prefix tokens), `patches` (every token of the patch grid), or a patch of the grid
 * as `[row, column]` (0-based, row-major; token = prefix + row·width + column).
 */
export type TokenChoice = number | 'class' | 'patches' | [number, number];

/** A token-selective modulation: weight 1 on the chosen tokens, 0 elsewhere (where the gain is `outside`). */
export interface TokenSelection {
  /** The chosen tokens, in the order written. */
  at: TokenChoice[];
  /** Gain applied to the tokens not chosen. Default 1. */
  outside: number;
}

/** What a modulation's vectors and lists index: features (channels of a feature map) or heads of a multi-head tensor. */
export type ModulationUnit = 'feature' | 'head';

/** Keys every modulation kind accepts. */
interface ModulationCommon {
  /** ONNX tensor name of the site. */
  site: string;
  /** Optional spatial window; absent means spatially global. */
  window?: SpatialWindow;
  /** Optional token selection (token tensors only); absent means every token. Exclusive with `window`. */
  tokens?: TokenSelection;
  /** `head`: values, lists and table rows index heads (`headCount` of them) instead of features; absent: features. */
  per?: 'head';
  /** Number of heads the feature axis is split into (head h holds features h·d … h·d + d − 1); absent: from the site's layout or the graph. */
  headCount?: number;
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

/** Lesion of an explicit channel list (or, with `per: head`, head list): those get gain exactly 0. */
export interface LesionListModulation extends ModulationCommon {
  kind: 'lesion';
  /** Distinct channel (feature) indices, or head indices with `per: head` (spec key `heads`), in the order written. */
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

/** Shape of a site tensor as the resolver needs it (build one with `siteShapeOf`, site-shape.ts). */
export interface SiteShape {
  /** Per-stimulus shape (batch axis dropped); for a shared site, the whole tensor's shape. */
  shape: number[];
  /** The tensor's layout: which axis holds features. */
  layout: TensorLayout;
  /** Size of the feature axis (channels of a map, D of tokens). */
  features: number;
  /** Positions per feature (H·W of a map, T of tokens, 1 of a vector). */
  positions: number;
  /** The 2-D arrangement windows and patches map onto (prefix tokens outside it); null without one. */
  grid: TokenGrid | null;
  /** Heads of a multi-head tensor, when the layout or the graph says. */
  heads?: number;
  /** True when the first axis is not the batch (batch merged with tokens): G is one `[1, …, D]` for every stimulus and position. */
  shared?: boolean;
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
  /** The site's geometry (shape, layout, features, positions, grid). */
  siteShape: SiteShape;
  /** Size of the feature axis (F). */
  features: number;
  /** Positions per feature (P = outer · inner of the layout geometry). */
  positions: number;
  /** True when G and B cover every position (a window or a token selection is set); otherwise one value per feature. */
  spatial: boolean;
  /** What the spec's vectors indexed; the resolved vectors are always per feature. */
  unit: ModulationUnit;
  /** Heads the features were grouped into (`per: head`), else null. */
  heads: number | null;
  /** Per-feature gain g_k before window and noise, `[F]`. */
  gain: Float32Array;
  /** Per-feature offset b_k before window and noise, `[F]`. */
  offset: Float32Array;
  /**
   * Position weights `[P]` indexed by p = o·inner + i of the layout geometry (a map: p = h·W + w; tokens:
   * p = token index), from a window or a token selection; null when every position is treated alike.
   */
  window: Float32Array | null;
  /** Gain where the position weight is 0; 1 without a window or token selection. */
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
  /** Feature maps and vectors: channels and map size (as before layouts); other layouts: features, positions, per-stimulus dims and layout kind. */
  shape: { channels: number; height: number; width: number } | { features: number; positions: number; dims: number[]; layout: string; shared: boolean };
  /** The gain vector actually fed (float32 values as numbers). */
  gain: number[];
  /** The offset vector actually fed. */
  offset: number[];
  window: SpatialWindow | null;
  /** The token selection as written, when one was given (absent otherwise, so older records are unchanged). */
  tokens?: TokenSelection;
  outside: number;
  noise: NoiseSettings | null;
  allowNegative: boolean;
  /** Kind-specific details: target, strength, lesioned channels, values file. */
  details: Record<string, string | number | boolean | number[]>;
}
