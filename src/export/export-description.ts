/**
 * `export.json`, the description of an export folder: where its arrays came from and the coordinates
 * that label them. A reader needs nothing else to turn `layers/NNN-slug.npy` into a labelled array
 * (`tools/python/sonde_read.py` does it for NumPy and xarray).
 */
import type { ActivationDtype, KeepMode, SnapshotManifest } from '../snapshot/manifest.js';
import type { TensorLayout } from '../graph/layout.js';

/** Version of the `export.json` layout written by this build; readers refuse versions they do not know. */
export const EXPORT_FORMAT = 1;

/** One `.npy` file of an export. */
export interface ExportArrayFile {
  /** Path relative to the export folder. */
  file: string;
  /** Element type: `float32` (`<f4`) or `float16` (`<f2`, the stored bits). */
  dtype: ActivationDtype;
  /** Array shape, stimulus axis first. */
  shape: number[];
  /** SHA-256 (hex) of the whole file, header included. */
  sha256: string;
  bytes: number;
}

/** One exported layer. */
export interface ExportLayer {
  /** ONNX tensor name. */
  name: string;
  op: string;
  /** Position among the model's recordable tensors in topological order (0-based). */
  depth: number;
  /** Weight layers on the longest path from the input (absent when the snapshot does not record it). */
  weightDepth?: number;
  /** Per-stimulus shape (the activation array is [stimuli, ...shape]). */
  shape: number[];
  /** Axis names of the activation array, stimulus first (see `axisNames`). */
  dims: string[];
  /** Channels (features) along the layout's feature axis (`layout`): what channel means keep, averaged over the other axes. */
  channels: number;
  /** The layer's layout (feature axis, token grid, heads); absent for snapshots recorded before layouts (features on the first axis). */
  layout?: TensorLayout;
  /** Storage type of the activations in the snapshot (the `.npy` file's own is `activation.dtype`; `--float32` widens float16). */
  dtype: ActivationDtype;
  keep: KeepMode;
  /** `baseline`: read from the modulated snapshot's baseline (the layer is upstream of the modulation). */
  source: 'snapshot' | 'baseline';
  /** NaN/±Infinity values the recording counted (absent when not counted). */
  nonFinite?: number;
  /** [stimuli, ...shape] activations; null when the snapshot kept channel means only. */
  activation: ExportArrayFile | null;
  /** [stimuli, channels] spatial channel means, float32. */
  channelMeans: ExportArrayFile;
}

/** The whole `export.json`. */
export interface ExportDescription {
  format: number;
  kind: 'sonde-export';
  tool: { name: 'sonde'; version: string };
  created: string;
  /** True only after every array file is written and renamed; written last. */
  complete: boolean;
  /** The exported snapshot: its folder (absolute), the SHA-256 of its manifest, its baseline folder (or null). */
  snapshot: { path: string; manifestSha256: string; baseline: string | null };
  model: SnapshotManifest['model'];
  readout: SnapshotManifest['readout'] | null;
  /** The snapshot's resolved modulation (vectors actually fed, seeds, windows), null for a baseline. */
  modulation: unknown;
  /**
   * Coordinates of the stimulus axis: global index, id and label set of each row, in row order;
   * `firstIndex` is the global index of row 0 (a shard's first stimulus).
   */
  stimuli: { count: number; firstIndex: number; index: number[]; id: string[]; labels: string[][]; categories: string[] };
  layers: ExportLayer[];
}

/**
 * Axis names of a layer's activation array, stimulus axis first, from the layer's layout
 * (src/graph/layout.ts): token × feature for tokens [T, D], y × x × channel for channels-last maps, `head`
 * on the heads axis of attention internals; otherwise the first per-stimulus axis is the channel axis and
 * a three-axis tensor is channel × y × x (ONNX's NCHW for feature maps, common practice); other axes are
 * named by position. Channel means keep the feature axis.
 */
export function axisNames(rank: number, layout?: TensorLayout): string[] {
  if (rank === 0) return ['stimulus'];
  if (layout?.kind === 'tokens' && rank === 2) return ['stimulus', 'token', 'feature'];
  if (layout?.kind === 'channels-last' && rank === 3 && layout.featureAxis === 2) return ['stimulus', 'y', 'x', 'channel'];
  if (layout?.kind === 'heads' && layout.featureAxis !== null) return ['stimulus', ...Array.from({ length: rank }, (_, k) => (k === layout.featureAxis ? 'head' : `axis${k + 1}`))];
  if (rank === 3) return ['stimulus', 'channel', 'y', 'x'];
  return ['stimulus', 'channel', ...Array.from({ length: rank - 1 }, (_, k) => `axis${k + 2}`)];
}
