/**
 * `categoryReadout`: which recorded readout units score each stimulus category, for every analysis of
 * recorded or replayed readouts (diff's task, sweep, the size-matched comparison, the ceiling). By
 * default the snapshot's readout (the sidecar at record time): one unit per category. With a readout
 * map (src/graph/category-map.ts) the map's categories, each scored by the log-sum-exp of its units
 * (src/stats/log-sum-exp.ts); a one-unit category's score is that unit's value, bit for bit, so both
 * paths read the same numbers where they overlap.
 */
import { UsageError } from '../errors.js';
import { describeMapTag, resolveReadoutMap, type ReadoutMap, type ReadoutMapTag, type ResolvedReadoutMap } from '../graph/category-map.js';
import { groupColumn } from '../stats/log-sum-exp.js';
import type { Snapshot } from '../snapshot/snapshot.js';

/** The readout of a snapshot as categories. */
export interface CategoryReadout {
  /** The recorded readout tensor. */
  layer: string;
  /** Its units per stimulus. */
  width: number;
  /** Category names: the sidecar's unit kinds (one per unit, may repeat), or the map's categories. */
  kinds: string[];
  /** The sidecar's decision threshold (one unit's logit); undefined under a map (no threshold carries over to a group score). */
  threshold: number | undefined;
  /** The map, resolved; null for the sidecar's units. */
  map: ResolvedReadoutMap | null;
  /** The units whose log-sum-exp scores `category` (the sidecar's first unit of that kind), or null when none does. */
  unitsOf(category: string): number[] | null;
}

/**
 * The categories of a snapshot's readout, with or without a map.
 * @param snapshot the baseline (its manifest's readout, or its last layer under a map without one).
 * @param map the readout map, or null/undefined for the sidecar's units.
 * @throws UsageError as `readoutOf` without a map; under a map, when the readout was not recorded or
 *   the map does not resolve against it (see `resolveReadoutMap`).
 */
export function categoryReadout(snapshot: Snapshot, map?: ReadoutMap | null): CategoryReadout {
  if (!map) {
    const readout = readoutOf(snapshot);
    const width = snapshot.layerGeometry(readout.layer).channels;
    return {
      layer: readout.layer,
      width,
      kinds: readout.kinds,
      threshold: readout.threshold,
      map: null,
      unitsOf: (category) => {
        const unit = readout.kinds.indexOf(category);
        return unit < 0 ? null : [unit];
      },
    };
  }
  const declared = snapshot.manifest.readout ?? null;
  const layers = snapshot.manifest.layers;
  const layer = declared?.name ?? layers[layers.length - 1]!.name;
  if (!layers.some((l) => l.name === layer)) {
    throw new UsageError('E_READOUT_MAP', `${map.source}: the readout "${layer}" was not recorded in ${snapshot.folder}`, { hint: 'record the baseline with its default layers (the readout is one of them) or --layers including it' });
  }
  const width = snapshot.layerGeometry(layer).channels;
  const names = declared && declared.name === layer && declared.kinds.length === width ? declared.kinds : null;
  const resolved = resolveReadoutMap(map, { tensor: layer, width, names });
  const index = new Map(resolved.categories.map((c, g) => [c, g]));
  return {
    layer,
    width,
    kinds: [...resolved.categories],
    threshold: undefined,
    map: resolved,
    unitsOf: (category) => {
      const g = index.get(category);
      return g === undefined ? null : resolved.groups[g]!;
    },
  };
}

/**
 * The score of `category` for every row of a readout: LSE of its units (one unit: its value).
 * @param raw [rows, width] row-major readout values.
 * @throws UsageError when no unit scores the category.
 */
export function categoryColumn(readout: CategoryReadout, raw: ArrayLike<number>, rows: number, category: string): Float64Array {
  const units = readout.unitsOf(category);
  if (!units) throw new UsageError('E_TASK', `category "${category}" has no readout unit${readout.map ? ` in readout map ${readout.map.name}` : ''}`);
  return groupColumn(raw, rows, readout.width, units);
}

/** Resolves the readout layer and the unit of each category (from the manifest's readout, else the last layer when its width equals the category count). */
export function readoutOf(base: Snapshot): { layer: string; kinds: string[]; threshold: number | undefined } {
  const readout = base.manifest.readout;
  if (readout) return { layer: readout.name, kinds: readout.kinds, threshold: readout.threshold };
  const last = base.manifest.layers[base.manifest.layers.length - 1]!;
  const units = base.layerGeometry(last.name).channels;
  if (units === base.categories.length) return { layer: last.name, kinds: base.categories, threshold: undefined };
  throw new UsageError('E_TASK', `cannot tell which readout unit belongs to which category: the snapshot's model has no sidecar naming its outputs, and its last layer "${last.name}" has ${units} units for ${base.categories.length} categories`, {
    hint: 'write MODEL.json beside the model with {"outputs": {"name": ..., "kinds": [...]}} and record again, or group its units into your categories with --readout-map',
  });
}

/** One side of a readout-map comparison: what it is (for the message) and the map it was made under. */
export interface MapSide {
  /** e.g. `--tuning T.arrow`, `--sensitivity S.arrow`, `this run`. */
  what: string;
  tag: ReadoutMapTag | null;
}

/**
 * Refuses to combine tables (or a table and a run) made under different readout maps: one line naming
 * both sides' maps and the fix.
 * @throws UsageError when the maps' digests differ, or one side has a map and the other none.
 */
export function assertSameReadoutMap(a: MapSide, b: MapSide): void {
  if ((a.tag?.sha256 ?? null) === (b.tag?.sha256 ?? null)) return;
  const named = a.tag ?? b.tag!;
  throw new UsageError('E_READOUT_MAP', `${a.what} was made under ${describeMapTag(a.tag)} but ${b.what} under ${describeMapTag(b.tag)}; their categories are not scored alike`, {
    hint: `make both with the same --readout-map (e.g. the map ${named.name} given to tune, sense, sweep and size-matched alike)`,
  });
}
