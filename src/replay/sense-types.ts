/**
 * The options, results and defaults of `senseSites` (src/replay/sense.ts): steps, methods, the per-site
 * block a measurement returns and the readout sums shards add up.
 */
import type { LoadedModel } from '../graph/load-model.js';
import type { SensitivityTableBlock } from '../snapshot/tables.js';
import type { ShardSpec } from '../record/shard.js';
import type { ReadoutChoice } from './sense-plan.js';
import type { ReadoutMap } from '../graph/category-map.js';

/**
 * Default step h of a gain; with Richardson the runs are at ±h and ±h/2. Chosen on the PyTorch reference
 * networks (tests/reference/README.md): in float32, Richardson from 2e-3 and 1e-3 came closest to
 * autograd of the steps tried (1e-2 … 2.5e-4) — larger steps cross more ReLU kinks, smaller ones drown
 * in rounding.
 */
export const DEFAULT_STEP = 0.002;
/**
 * Default step h of an offset (added in activation units, not relative to the activation): measured on
 * the same networks with steps 2e-3, 5e-3, 1e-2 and 2e-2, 5e-3 was the one step within 1e-2 of autograd
 * on all four (at 2e-3 float32 rounding alone left 1.9e-2 on the SqueezeNet site).
 */
export const DEFAULT_OFFSET_STEP = 0.005;

/** The default step of a kind. */
export function defaultStep(kind: 'gain' | 'offset'): number {
  return kind === 'offset' ? DEFAULT_OFFSET_STEP : DEFAULT_STEP;
}
/**
 * How a sensitivity is computed: `exact` (default) by reverse-mode gradients compiled into the ONNX graph
 * (src/replay/sense-exact.ts); `richardson` and `secant` from perturbed runs (see sense.ts's comment).
 */
export type SenseMethod = 'exact' | 'richardson' | 'secant';
/** The methods, the default first. */
export const SENSE_METHODS: readonly SenseMethod[] = ['exact', 'richardson', 'secant'];
/** Default rows per downstream run. */
export const DEFAULT_ROWS_PER_RUN = 256;
/** Default cap on the feed memory of the two runs in flight (bytes). */
export const DEFAULT_FEED_BYTES = 256 * 2 ** 20;
/** Default warning threshold: fd_error above this fraction of the category's largest |sensitivity|. */
export const DEFAULT_WARN_RATIO = 0.05;

/** Options of `senseSites`. */
export interface SenseOptions {
  /** Path of the .onnx model (or a model already loaded). */
  model: string | LoadedModel;
  /** Stimuli (folder, CSV, `.npy`); optional with `from`, where they must list the same stimuli. */
  stimuli?: string;
  /** Labels CSV for `.npy` stimuli. */
  labels?: string;
  /** Baseline snapshot folder to feed the downstream part from. */
  from?: string;
  /** Site tensor name(s), or `all-activations`. */
  site: string | readonly string[];
  /** `OUTPUT[:CATEGORY|INDEX]`; default: the model's first graph output, every unit. */
  readout?: string;
  /**
   * Readout map (`--readout-map`): the readout's units grouped into categories, each scored by the
   * log-sum-exp of its units; the categories replace the sidecar's. `readout` then names the tensor only.
   */
  readoutMap?: ReadoutMap;
  /** `gain` (default): derivative w.r.t. a multiplicative gain at 1; `offset`: w.r.t. an additive offset at 0. */
  kind?: 'gain' | 'offset';
  /** Step h > 0 (default DEFAULT_STEP for gains, DEFAULT_OFFSET_STEP for offsets); Richardson also runs at h/2. */
  step?: number;
  /** `exact` (default): gradients, one forward and backward run per stimulus and category; `richardson`: (4·D(h/2) − D(h))/3, four runs per channel; `secant`: D(h), two runs per channel. */
  method?: SenseMethod;
  /** Average only over stimuli containing this category, or `each`: every readout category over the stimuli containing it. */
  stimuliOf?: string;
  /** `head`: one value per head of a multi-head site (the sum of its features' values; see sense-heads.ts); default one per feature (channel). */
  per?: 'feature' | 'head';
  /** Perturbed rows per downstream run (default 256; finite differences only). */
  rowsPerRun?: number;
  /** Cap on feed bytes of the two runs in flight (default 256 MiB); lowers rowsPerRun for wide sites. */
  feedBytes?: number;
  /** Bytes of tensors one runtime call may hold (default `DEFAULT_RUN_BYTES`, src/graph/run-memory.ts): fewer rows per call where they would exceed it. */
  runBytes?: number;
  /** Stimuli per run of the whole network when there is no baseline (default 16); with `exact`, also the rows (stimulus × category) per gradient run. */
  batch?: number;
  /** Runtime intra-op threads (0: the runtime chooses). */
  threads?: number;
  /** Full input shape for models with dynamic spatial axes. */
  inputShape?: number[];
  /** Preprocessing overrides (default: model sidecar, else mean 0, std 1). */
  mean?: number[];
  std?: number[];
  bgr?: boolean;
  /** Warning threshold (default 0.05). */
  warnRatio?: number;
  /** Write the sensitivity table here. */
  out?: string;
  /** Replace an existing file at `out` (without it an existing file is refused before any work). */
  force?: boolean;
  /**
   * Measure over shard K of N of the stimuli only (the split of src/record/shard.ts): the result's
   * blocks carry `sums`, the partial statistics `sonde merge` combines; their sensitivities cover only
   * the shard and no warnings are raised.
   */
  shard?: ShardSpec;
  /** Called after every downstream run. */
  onProgress?: (progress: { site: string; rowsDone: number; rowsTotal: number }) => void;
}

/** The measured sensitivities of one site, with its cost. */
export interface SiteSensitivity extends SensitivityTableBlock {
  /** How `sensitivity` was computed. */
  method: SenseMethod;
  /** What one value is of: a channel of a feature map or vector, a feature of a token tensor (along the site's layout), or a head (`per: head`). */
  unit?: 'channel' | 'feature' | 'head';
  /** Richardson: |D(h/2) − D(h)| / 3, how far the extrapolation moved the h/2 secant, [C, K]; null for the secant. */
  extrapolationShift: Float64Array | null;
  /** The warning line, when the method's indicator (extrapolationShift, or fd_error for the secant) is large somewhere. */
  warning?: string;
  /** Largest indicator (extrapolationShift for Richardson, fd_error for the secant) / (largest |sensitivity| of its category) over channels and categories. */
  worstErrorRatio: number;
  /** Downstream runs and rows they held. */
  runs: number;
  rows: number;
  /** Perturbed rows not run (gain kind): channels exactly 0 at the site for a stimulus, whose rows would equal the unperturbed one. */
  skippedRows: number;
  /** Runs of the whole network (no baseline) and the stimuli they held. */
  prefixRuns: number;
  /** Seconds spent in downstream runs, in whole-network runs, and in all (wall). */
  tailSeconds: number;
  prefixSeconds: number;
  wallSeconds: number;
  /** Share of the network's MACs downstream of the site (Conv/Gemm/MatMul count). */
  downstreamShare: number;
  /**
   * Estimated cost in forward-pass equivalents per channel and stimulus, from the MAC count:
   * (rows · downstreamShare + stimuli run through the whole network) / (channels · stimuli used).
   * The perturbed runs alone need 4 · downstreamShare with Richardson, 2 · downstreamShare with the secant.
   * With `exact` the rows are (stimulus, category) pairs, each one forward and one backward pass of the
   * downstream part, counted as 3 · downstreamShare (a backward pass ≈ two forward passes, common practice),
   * and the result is per stimulus for all channels at once.
   */
  forwardEquivalentsPerChannel: number;
  /** Stimuli run through the whole network to compute boundary tensors (0 with a baseline). */
  prefixStimuli: number;
  /** Stimuli that entered at least one category's average. */
  stimuliUsed: number;
  /** With `shard`: the readout sums the averages are made of (see `sensitivityFromSums`). */
  sums?: SensitivitySums;
}

/** Readout sums of one site over some stimuli: what shards add up. */
export interface SensitivitySums {
  /** 1 (exact: `perturbed` holds Σ of the gradients, [1, C, K]), 2 (±h: secant) or 4 (±h, ±h/2: Richardson). */
  variants: number;
  /** Σ over stimuli of readout c with channel k perturbed by variant v, [V, C, K]: i = (v*C + k)*K + c. */
  perturbed: Float64Array;
  /** Σ of the unperturbed readout per category, [K]. */
  identity: Float64Array;
  /** Stimuli per category, [K]. */
  counts: Int32Array;
}

/** The readout a sensitivity refers to. */
/** What `senseSites` returns. */
export interface SenseResult {
  sites: SiteSensitivity[];
  readout: ReadoutChoice;
  /** Where the boundary tensors came from. */
  source: 'baseline' | 'network';
  warnings: string[];
  file?: { path: string; bytes: number; rows: number };
  /** Stimuli in the listing, and the local index range measured ([0, N) without a shard). */
  stimuli: number;
  range: [number, number];
  /** The metadata written into (or, for a shard, meant for) the sensitivity table. */
  metadata: Record<string, string>;
}
