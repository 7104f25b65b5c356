/**
 * Pictures of one snapshot pair (a baseline and a modulated run recorded from it), read from the
 * snapshots themselves, for any pair — the report's picture section and `sonde pictures`:
 * - example stimuli of each category (when the stimuli are a `.npy` array, as `record` notes in the
 *   manifest; the first display labelled with the category);
 * - feature maps of one stimulus (the first showing the attended category) at the site and the deepest
 *   spatial layer recorded below it: baseline, modulated, and their difference (channel means over the
 *   map), with the window's outline when the modulation has one;
 * - ROC curves of the readout, baseline against modulated, per category (the attended one, or up to 4);
 * - the signature scatter (with a tuning table): each channel's activity ratio against its tuning rank for
 *   the attended category, with the least-squares line, at the site and below;
 * - for a windowed modulation, the spatial profile: relative change against distance from the window's
 *   centre, per spatial layer at or below the site (`compare/spatial-profiles.ts`, at most 64 stimuli).
 * `pairPictureData` collects the numbers (what `--json` prints); `pairPictureSections` draws them.
 */
import { fitSignature } from '../../analysis/signature.js';
import { rocCurve, type RocPoint } from '../../stats/roc-curve.js';
import type { SpatialRing } from '../../analysis/spatial-profile.js';
import { windowSpatialProfiles } from '../../compare/spatial-profiles.js';
import { rocAuc } from '../../stats/roc.js';
import { openSnapshot, type Snapshot } from '../../snapshot/snapshot.js';
import { readTuningTable } from '../../snapshot/tables.js';
import { layerLayout, type ManifestLayer } from '../../snapshot/manifest.js';
import { readNpyHeader } from '../../stimuli/npy.js';
import { closeSync, openSync, readSync } from 'node:fs';
import type { Outline } from './raster.js';

/** Options of `pairPictureData`. */
export interface PairPictureOptions {
  /** Baseline snapshot folder (or an open snapshot). */
  base: string | Snapshot;
  /** Modulated snapshot folder recorded with `--from` the baseline. */
  mod: string | Snapshot;
  /** Tuning table (from `sonde tune`) for the signature scatter. */
  tuning?: string;
  /** Attended category (default: the modulation's target). */
  target?: string;
  /** Stimulus shown in the feature maps (default: the first labelled with the target, else 0). */
  stimulus?: number;
}

/** Numbers behind the pictures of a pair. */
export interface PairPictureData {
  site: string | null;
  target: string | null;
  window: Outline | null;
  stimuli: Array<{ category: string; index: number; height: number; width: number; pixels: number[] }>;
  featureMaps: Array<{ layer: string; stimulus: number; height: number; width: number; base: number[]; mod: number[] }>;
  roc: Array<{ category: string; base: RocPoint[]; mod: RocPoint[]; baseAuc: number; modAuc: number }>;
  signature: Array<{ layer: string; slope: number; intercept: number; rank: number[]; ratio: number[] }>;
  spatialProfile: Array<{ layer: string; stimuli: number; rings: SpatialRing[] }> | null;
}

interface ModulationRecord {
  site?: string;
  window?: { shape?: string; x0?: number; x1?: number; y0?: number; y1?: number; cx?: number; cy?: number; sigma?: number } | null;
  details?: { target?: unknown };
  target?: unknown;
}

function outlineOf(window: ModulationRecord['window']): Outline | null {
  if (!window) return null;
  if (window.shape === 'box' && [window.x0, window.x1, window.y0, window.y1].every((v) => typeof v === 'number')) return { shape: 'box', x0: window.x0!, x1: window.x1!, y0: window.y0!, y1: window.y1! };
  if (window.shape === 'gaussian' && [window.cx, window.cy, window.sigma].every((v) => typeof v === 'number')) return { shape: 'gaussian', cx: window.cx!, cy: window.cy!, sigma: window.sigma! };
  return null;
}

/** The spatial size of a channels-first map [C, H, W], or null for vectors, tokens and other layouts. */
function spatial(entry: Pick<ManifestLayer, 'shape' | 'layout'>): { channels: number; height: number; width: number } | null {
  const { shape } = entry;
  const layout = layerLayout(entry);
  if (layout.kind !== 'channels-first' || layout.featureAxis !== 0) return null;
  return shape.length === 3 && shape[1]! * shape[2]! > 1 ? { channels: shape[0]!, height: shape[1]!, width: shape[2]! } : null;
}

/** One stimulus's activations of a layer ([C·H·W]), by global index. */
async function stimulusActivation(snapshot: Snapshot, layer: string, index: number): Promise<Float32Array | null> {
  const { elements } = snapshot.layerGeometry(layer);
  for await (const batch of snapshot.readLayer(layer)) {
    for (let r = 0; r < batch.rows; r++) if (batch.index[r] === index && batch.activation) return batch.activation.slice(r * elements, (r + 1) * elements);
  }
  return null;
}

/** The channel mean of each map position: [C, H, W] → [H, W]. */
function channelMeanMap(values: Float32Array, channels: number, plane: number): number[] {
  const out = new Array<number>(plane).fill(0);
  for (let c = 0; c < channels; c++) for (let p = 0; p < plane; p++) out[p] += values[c * plane + p]! / channels;
  return out;
}

/**
 * Collects the numbers of every picture of a pair (see the module comment).
 * @param options the pair, tuning table, target and stimulus.
 * @returns the numbers; a picture kind the pair cannot give is empty (no `.npy` stimuli, no readout in
 *   the manifest, no tuning table, no window: `spatialProfile` null).
 * @throws as `openSnapshot` and `readTuningTable` (unreadable or damaged inputs).
 */
export async function pairPictureData(options: PairPictureOptions): Promise<PairPictureData> {
  const base = typeof options.base === 'string' ? openSnapshot(options.base) : options.base;
  const mod = typeof options.mod === 'string' ? openSnapshot(options.mod) : options.mod;
  const modulations = ((mod.manifest.modulation as { modulations?: ModulationRecord[] } | null)?.modulations ?? []);
  const first = modulations[0];
  const site = typeof first?.site === 'string' ? first.site : null;
  const targetValue = options.target ?? first?.details?.target ?? first?.target;
  const target = typeof targetValue === 'string' ? targetValue : null;
  const window = outlineOf(first?.window);
  const labels = base.stimuli.labels;
  const layers = base.manifest.layers;
  const siteEntry = layers.find((l) => l.name === site);
  const below = siteEntry ? layers.filter((l) => l.depth >= siteEntry.depth) : [];

  // example stimuli: the first display of each category, from the recorded .npy array
  const stimuli: PairPictureData['stimuli'] = [];
  const source = /^array (.+?)(?: with labels .*)?$/.exec(String(base.manifest.stimuli.source ?? ''))?.[1];
  if (source?.endsWith('.npy')) {
    try {
      // read only the header and the rows shown (a stimulus array can be gigabytes): float32, C order, [N, 3, H, W]
      const header = readNpyHeader(source);
      const [n, c, h, w] = header.shape as number[];
      if (header.descr === '<f4' && !header.fortranOrder && header.shape.length === 4 && c === 3 && n !== undefined && h !== undefined && w !== undefined) {
        const rowBytes = 4 * 3 * h * w;
        const fd = openSync(source, 'r');
        try {
          for (const category of base.categories.slice(0, 12)) {
            const i = labels.findIndex((l) => l.includes(category));
            if (i < 0 || i >= n) continue;
            const bytes = Buffer.alloc(rowBytes);
            if (readSync(fd, bytes, 0, rowBytes, header.dataStart + i * rowBytes) !== rowBytes) continue;
            stimuli.push({ category, index: i, height: h, width: w, pixels: Array.from(new Float32Array(bytes.buffer, bytes.byteOffset, rowBytes / 4)) });
          }
        } finally {
          closeSync(fd);
        }
      }
    } catch {
      // the stimuli moved or changed since recording: no examples (the other pictures do not need them)
    }
  }

  // feature maps of one stimulus at the site and the deepest spatial layer below it
  const chosen = options.stimulus ?? Math.max(0, target ? labels.findIndex((l) => l.includes(target)) : 0);
  const mapLayers = below.filter((l) => spatial(l) && l.keep === 'full');
  const shownLayers = [...new Set([mapLayers[0], mapLayers[mapLayers.length - 1]].filter((l) => l !== undefined))];
  const featureMaps: PairPictureData['featureMaps'] = [];
  for (const layer of shownLayers) {
    const geometry = spatial(layer)!;
    const a = await stimulusActivation(base, layer.name, base.firstIndex + chosen);
    const b = await stimulusActivation(mod, layer.name, mod.firstIndex + chosen);
    if (!a || !b) continue;
    const plane = geometry.height * geometry.width;
    featureMaps.push({ layer: layer.name, stimulus: chosen, height: geometry.height, width: geometry.width, base: channelMeanMap(a, geometry.channels, plane), mod: channelMeanMap(b, geometry.channels, plane) });
  }

  // ROC curves of the readout
  const roc: PairPictureData['roc'] = [];
  const readout = base.manifest.readout as { name?: string; kinds?: string[] } | null;
  if (readout?.name && Array.isArray(readout.kinds) && layers.some((l) => l.name === readout.name)) {
    const baseMeans = await base.readChannelMeans(readout.name);
    const modMeans = await mod.readChannelMeans(readout.name);
    const units = readout.kinds.length;
    const categories = target && readout.kinds.includes(target) ? [target] : readout.kinds.slice(0, 4);
    for (const category of categories) {
      const unit = readout.kinds.indexOf(category);
      const signal = Uint8Array.from(labels, (l) => (l.includes(category) ? 1 : 0));
      const scoresBase = Float64Array.from({ length: labels.length }, (_, n) => baseMeans[n * units + unit]!);
      const scoresMod = Float64Array.from({ length: labels.length }, (_, n) => modMeans[n * units + unit]!);
      roc.push({ category, base: rocCurve(scoresBase, signal), mod: rocCurve(scoresMod, signal), baseAuc: rocAuc(scoresBase, signal), modAuc: rocAuc(scoresMod, signal) });
    }
  }

  // the signature scatter, with a tuning table
  const signature: PairPictureData['signature'] = [];
  if (options.tuning && target) {
    const blocks = new Map(readTuningTable(options.tuning).blocks.map((b) => [b.layer, b]));
    for (const layer of below.filter((l) => blocks.has(l.name)).slice(0, 6)) {
      const block = blocks.get(layer.name)!;
      const k = block.categories.indexOf(target);
      if (k < 0) continue;
      const tuning = Float64Array.from({ length: block.channels }, (_, c) => block.tuning[c * block.categories.length + k]!);
      const fit = fitSignature({ baseChannelMeans: await base.readChannelMeans(layer.name), modChannelMeans: await mod.readChannelMeans(layer.name), stimuli: labels.length, channels: block.channels, tuning });
      signature.push({ layer: layer.name, slope: fit.slope, intercept: fit.intercept, rank: Array.from(fit.normalisedRank), ratio: Array.from(fit.ratio) });
    }
  }

  // the spatial profile around the window's centre (compare/spatial-profiles.ts, as diff --json gives it)
  const profiles = window ? await windowSpatialProfiles(base, mod) : null;
  const spatialProfile: PairPictureData['spatialProfile'] = profiles ? profiles.layers : window ? [] : null;
  return { site, target, window, stimuli, featureMaps, roc, signature, spatialProfile };
}
