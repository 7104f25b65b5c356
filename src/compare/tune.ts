/**
 * `tuneSnapshot`: category tuning of every channel of a labelled baseline snapshot, layer by layer, from
 * the recorded per-stimulus channel means (one layer in memory at a time, [N, C] floats), written as a
 * long-format tuning table (see `src/snapshot/tables.ts`). The numbers come from `computeTuning`
 * (src/analysis/tuning.ts): mean response per category over the stimuli that carry the category
 * (multi-label displays count for each of their labels, or only one-label stimuli with `singleLabel`),
 * its standard error, the count, and the tuning value — the z-score across categories with the
 * population SD, the same normalisation `normaliseAcrossCategories` applies to a table before it becomes
 * a gain pattern, so a tuning table passes through the modulation resolver unchanged.
 */
import { closestHint, UsageError } from '../errors.js';
import { computeTuning, type TuningTable } from '../analysis/tuning.js';
import { selectLayers } from '../graph/select.js';
import { layerLayout, type ManifestLayer } from '../snapshot/manifest.js';
import type { TensorLayout } from '../graph/layout.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { READOUT_MAP_KEY, writeTuningTable, type TuningTableBlock } from '../snapshot/tables.js';
import { assertOutFileWritable } from '../outputs/output-file.js';
import { mapTag, resolveReadoutMap, type ReadoutMap, type ReadoutMapTag } from '../graph/category-map.js';

/**
 * A channel counts as selective when its selectivity index (r_max − r_rest)/(r_max + r_rest) is at least
 * 1/3, i.e. its preferred category drives it at least twice as strongly as the mean of the others. Our
 * convention for the terminal summary (a "twice the rest" criterion is common practice, no single source).
 */
export const SELECTIVE_INDEX = 1 / 3;

/** Options of `tuneSnapshot`. */
export interface TuneOptions {
  /** Baseline snapshot folder (or one already opened). It must carry labels. */
  snapshot: string | Snapshot;
  /** Layer selector over the snapshot's layers (`all`, globs, names joined by `+`); default: every layer with a channel axis. */
  layers?: string;
  /** Use only stimuli with exactly one label. Default false. */
  singleLabel?: boolean;
  /** Categories to tune for, in table order; default: every category in the snapshot's labels. */
  categories?: string[];
  /**
   * Readout map (`--readout-map`): tune for its categories, in its order, and record it in the table, so
   * the table pairs with sensitivity tables made under the same map. Checked against the snapshot's
   * readout when the sidecar named one at record time.
   */
  readoutMap?: ReadoutMap;
  /** Write the tuning table here (an `.arrow` file); omit to only compute. */
  out?: string;
  /** Replace an existing file at `out` (without it an existing file is refused before any work). */
  force?: boolean;
}

/** What the tuned units of a layer are (see `LayerTuningSummary.unit`). */
export type TuningUnit = 'channels' | 'features' | 'heads';

/** The tuned units of a layer with this layout. */
export function tuningUnit(layout: TensorLayout): TuningUnit {
  return layout.kind === 'tokens' ? 'features' : layout.kind === 'heads' ? 'heads' : 'channels';
}

/** The terminal summary of one layer. */
export interface LayerTuningSummary {
  layer: string;
  op: string;
  depth: number;
  channels: number;
  /** What a channel is at this layer, from its layout: `features` of token tensors (tuned over all tokens, not per position), `heads` of attention internals, `channels` of maps and vectors. */
  unit?: TuningUnit;
  /** Fraction of channels with selectivity ≥ SELECTIVE_INDEX (channels with NaN selectivity count as not selective). */
  selectiveFraction: number;
  /** Mean selectivity over channels with a finite index (NaN when none). */
  meanSelectivity: number;
  /** Channels flagged zero-variance (tuning values 0). */
  zeroVarianceChannels: number;
  /** Channels with NaN/Inf channel means. */
  nonFiniteChannels: number;
  /** Channels with a negative mean response (selectivity undefined, NaN). */
  negativeChannels: number;
}

/** What `tuneSnapshot` returns. */
export interface TuneResult {
  /** One block per layer, in depth order (what the table file holds). */
  blocks: TuningTableBlock[];
  summaries: LayerTuningSummary[];
  categories: string[];
  /** Stimuli per category (the same for every layer). */
  counts: Record<string, number>;
  stimuliUsed: number;
  stimuliSkipped: number;
  /** The table file written, with its size; absent when `out` was not given. */
  file?: { path: string; bytes: number; rows: number };
}

/**
 * Computes the tuning of every selected layer of a snapshot and (optionally) writes the tuning table.
 * @param options snapshot, layers, singleLabel, categories, out.
 * @returns per-layer blocks and summaries, category counts, and the file written.
 * @throws UsageError when the snapshot has no labels, has fewer than two categories, a category has no
 *   stimuli (with `singleLabel`: no one-label stimuli), the selector matches nothing, or a selected layer
 *   has no channel axis, or `out` exists without `force` (or is the snapshot or inside it); RuntimeFailure
 *   when a layer file cannot be read or the table cannot be written.
 * Edge cases: zero-variance channels get tuning 0 and are flagged; NaN/Inf channel means make that
 * channel's values NaN (counted in the summary), never silently dropped.
 */
export async function tuneSnapshot(options: TuneOptions): Promise<TuneResult> {
  if (options.out !== undefined) assertOutFileWritable(options.out, { force: options.force ?? false, inputs: [{ option: 'SNAPSHOT', path: typeof options.snapshot === 'string' ? options.snapshot : options.snapshot.folder }] });
  const snapshot = typeof options.snapshot === 'string' ? openSnapshot(options.snapshot) : options.snapshot;
  const folder = typeof options.snapshot === 'string' ? options.snapshot : snapshot.folder;
  const labelled = snapshot.stimuli.labels.filter((l) => l.length > 0).length;
  if (labelled === 0) {
    throw new UsageError('E_TUNE_LABELS', `snapshot ${folder} has no labels (${snapshot.manifest.stimuli.count} stimuli, none labelled); tuning needs labelled stimuli`, {
      hint: 'record it from a class folder, a path,label CSV, or a .npy with --labels',
    });
  }
  const { categories, layers } = planTuning(snapshot, { ...options, ...(options.readoutMap ? { categories: mapCategories(snapshot, options.readoutMap, folder) } : {}) }, folder);
  const tables: Array<{ layer: ManifestLayer; table: TuningTable }> = [];
  for (const layer of layers) {
    const { channels } = snapshot.layerGeometry(layer.name);
    const channelMeans = await snapshot.readChannelMeans(layer.name);
    const table = computeTuning({
      channelMeans,
      stimuli: snapshot.manifest.stimuli.count,
      channels,
      labels: snapshot.stimuli.labels,
      categories,
      singleLabel: options.singleLabel ?? false,
    });
    tables.push({ layer, table });
  }
  return assembleTuneResult({ folder: snapshot.folder, model: snapshot.manifest.model }, tables, categories, options);
}

/**
 * The categories and layers a tuning run covers, checked.
 * @throws UsageError as `tuneSnapshot` does for labels, categories and layers.
 */
export function planTuning(snapshot: Snapshot, options: Pick<TuneOptions, 'categories' | 'layers'>, folder: string): { categories: string[]; layers: ManifestLayer[] } {
  const categories = options.categories ?? snapshot.categories;
  if (categories.length < 2) {
    throw new UsageError('E_TUNE_LABELS', `snapshot ${folder} has ${categories.length} category (${categories.map((c) => JSON.stringify(c)).join(', ')}); tuning needs at least 2`, {
      hint: 'a z-score across categories is undefined for one category',
    });
  }
  const candidates = snapshot.manifest.layers.map((l) => ({ name: l.name, op: l.op, default: l.shape.length >= 1 }));
  const selected = options.layers === undefined ? candidates.filter((l) => l.default) : selectLayers(candidates, options.layers);
  if (selected.length === 0) throw new UsageError('E_SELECTOR', `snapshot ${folder} has no layer with a channel axis to tune`);
  const layers = selected.map((entry) => {
    const layer = snapshot.layer(entry.name);
    if (layer.shape.length === 0) {
      throw new UsageError('E_TUNE_LAYER', `layer "${layer.name}" of ${folder} is a scalar per stimulus (no channel axis); tuning needs channels`, { hint: 'leave it out of --layers' });
    }
    return layer;
  });
  return { categories: [...categories], layers };
}

/**
 * Builds the result of a tuning run from its per-layer tables (sorted by depth, summaries, counts) and
 * writes the table file when `options.out` is given.
 * @param source the snapshot folder and model (file metadata).
 * @param tables one tuning table per layer.
 * @param categories the categories tuned for.
 * @param options singleLabel and out.
 * @throws RuntimeFailure when the table cannot be written.
 */
export function assembleTuneResult(source: { folder: string; model: { file: string; sha256: string } }, tables: ReadonlyArray<{ layer: Pick<ManifestLayer, 'name' | 'op' | 'depth'> & Partial<Pick<ManifestLayer, 'shape' | 'layout'>>; table: TuningTable }>, categories: readonly string[], options: Pick<TuneOptions, 'singleLabel' | 'out'> & { readoutMap?: ReadoutMapTag }): TuneResult {
  const blocks: TuningTableBlock[] = [];
  const summaries: LayerTuningSummary[] = [];
  for (const { layer, table } of tables) {
    blocks.push({ layer: layer.name, depth: layer.depth, op: layer.op, ...table });
    summaries.push({ ...summariseLayer(layer.name, layer.op, layer.depth, table), ...(layer.shape ? { unit: tuningUnit(layerLayout({ shape: layer.shape, ...(layer.layout ? { layout: layer.layout } : {}) })) } : {}) });
  }
  const last = tables[tables.length - 1]!.table;
  blocks.sort((a, b) => (a.depth ?? 0) - (b.depth ?? 0));
  summaries.sort((a, b) => a.depth - b.depth);
  const counts: Record<string, number> = {};
  categories.forEach((c, i) => (counts[c] = last.count[i]!));
  const result: TuneResult = { blocks, summaries, categories: [...categories], counts, stimuliUsed: last.stimuliUsed, stimuliSkipped: last.stimuliSkipped };
  if (options.out !== undefined) {
    const written = writeTuningTable(options.out, blocks, {
      'sonde.snapshot': source.folder,
      'sonde.model': `${source.model.file} sha256:${source.model.sha256}`,
      'sonde.single_label': String(options.singleLabel ?? false),
      ...(options.readoutMap ? { [READOUT_MAP_KEY]: JSON.stringify(mapTag(options.readoutMap)) } : {}),
    });
    result.file = { path: options.out, ...written };
  }
  return result;
}

/**
 * The terminal summary of one layer's tuning.
 * @param layer, op, depth identify the layer.
 * @param table its tuning table.
 * @returns fractions and counts (see `LayerTuningSummary`).
 * @throws never.
 */
export function summariseLayer(layer: string, op: string, depth: number, table: TuningTable): LayerTuningSummary {
  let selective = 0;
  let finite = 0;
  let sum = 0;
  let zero = 0;
  let nonFinite = 0;
  let negative = 0;
  for (let k = 0; k < table.channels; k++) {
    const s = table.selectivity[k]!;
    if (table.zeroVariance[k] === 1) zero++;
    if (table.nonFinite[k]! > 0) nonFinite++;
    else if (Number.isNaN(s)) negative++;
    if (Number.isFinite(s)) {
      finite++;
      sum += s;
      if (s >= SELECTIVE_INDEX) selective++;
    }
  }
  return {
    layer,
    op,
    depth,
    channels: table.channels,
    selectiveFraction: selective / table.channels,
    meanSelectivity: finite > 0 ? sum / finite : Number.NaN,
    zeroVarianceChannels: zero,
    nonFiniteChannels: nonFinite,
    negativeChannels: negative,
  };
}

/**
 * The categories of a readout map for tuning a snapshot: the map's, in its order, each carried by some
 * stimulus; the map is resolved against the snapshot's readout when the sidecar named one (so unknown
 * units and repeats are refused here as in `sense`).
 * @throws UsageError for a map category no stimulus carries, or a map that does not resolve.
 */
export function mapCategories(snapshot: Snapshot, map: ReadoutMap, folder: string): string[] {
  const readout = snapshot.manifest.readout;
  if (readout && readout.kinds.length > 0 && snapshot.manifest.layers.some((l) => l.name === readout.name)) {
    const width = snapshot.layerGeometry(readout.name).channels;
    resolveReadoutMap(map, { tensor: readout.name, width, names: readout.kinds.length === width ? readout.kinds : null });
  }
  const categories = map.entries.map((e) => e.category);
  for (const category of categories) {
    if (!snapshot.categories.includes(category)) {
      const near = closestHint(category, snapshot.categories);
      throw new UsageError('E_READOUT_MAP', `${map.source}: category "${category}" has no stimuli in ${folder} (labels: ${snapshot.categories.slice(0, 8).join(', ')}${snapshot.categories.length > 8 ? ', …' : ''}${near ? `; ${near}` : ''})`, {
        hint: 'name the map\'s categories after the stimulus labels',
      });
    }
  }
  return categories;
}
