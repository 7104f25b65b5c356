/**
 * `loadModulationTables`: reads a tuning table and/or a sensitivity table and turns them into the
 * lookups the modulation resolver needs for the `tuning` and `sensitivity` kinds and for `lesion` with
 * `top` (`ResolveContext['tables']`), plus the category list in table order.
 */
import { firstDifference, nameList, UsageError } from '../errors.js';
import type { ResolveContext, TableLookup } from '../modulation/types.js';
import { readSensitivityTable, readTuningTable, tableReadoutMap, type SensitivityTableBlock, type TuningTableBlock } from '../snapshot/tables.js';
import { assertSameReadoutMap, type MapSide } from '../compare/category-readout.js';
import type { ReadoutMapTag } from '../graph/category-map.js';

/** Paths of the tables to load. */
export interface ModulationTablePaths {
  /** A tuning table (`sonde tune ... --out`). */
  tuning?: string;
  /** A sensitivity table (`sonde sense ... --out`). */
  sensitivity?: string;
}

/** What `loadModulationTables` returns. */
export interface ModulationTables {
  /** The lookups for `ResolveContext.tables`. */
  tables: NonNullable<ResolveContext['tables']>;
  /** Category names in table order (the tuning table's when both are given). */
  categories: string[];
  /** Layers (sites) each table covers. */
  layers: { tuning: string[]; sensitivity: string[] };
  /** The readout map the tables were made under (`sonde.readout_map`; the same for both), or null. */
  readoutMap: ReadoutMapTag | null;
}

/**
 * Loads the tables and builds the resolver's lookups: `(site, category)` → that category's values of
 * every channel of the site (tuning values t_kc, or the sensitivity values), or undefined when the table
 * lacks the site or category (the resolver then names the command that makes a table).
 * @param paths `tuning` and/or `sensitivity` file paths.
 * @returns lookups, the category list and the covered layers.
 * @throws UsageError when neither path is given, a file is missing or malformed (see
 *   `readTuningTable` / `readSensitivityTable`), or both are given and their categories differ (both
 *   lists named).
 */
export function loadModulationTables(paths: ModulationTablePaths): ModulationTables {
  if (paths.tuning === undefined && paths.sensitivity === undefined) {
    throw new UsageError('E_TABLES', 'loadModulationTables needs a tuning or a sensitivity table path');
  }
  const tables: NonNullable<ResolveContext['tables']> = {};
  const layers = { tuning: [] as string[], sensitivity: [] as string[] };
  let categories: string[] | undefined;
  let readoutMap: MapSide | null = null;
  if (paths.tuning !== undefined) {
    const file = readTuningTable(paths.tuning);
    readoutMap = { what: `--tuning ${paths.tuning}`, tag: tableReadoutMap(file) };
    tables.tuning = lookupOf(file.blocks, (b) => b.tuning);
    categories = file.categories;
    layers.tuning = file.blocks.map((b) => b.layer);
  }
  if (paths.sensitivity !== undefined) {
    const file = readSensitivityTable(paths.sensitivity);
    tables.sensitivity = lookupOf(file.blocks, (b) => b.sensitivity);
    layers.sensitivity = file.blocks.map((b) => b.layer);
    const side = { what: `--sensitivity ${paths.sensitivity}`, tag: tableReadoutMap(file) };
    // tables made under different readout maps do not pair, even with the same category names
    if (readoutMap) assertSameReadoutMap(readoutMap, side);
    else readoutMap = side;
    if (categories === undefined) categories = file.categories;
    else if (!sameSet(categories, file.categories)) {
      const difference = firstDifference(categories, file.categories, `--tuning ${paths.tuning}`, `--sensitivity ${paths.sensitivity}`);
      throw new UsageError('E_TABLES', `the tables have different categories (${categories.length} in the tuning table: ${nameList(categories, 4)}; ${file.categories.length} in the sensitivity table: ${nameList(file.categories, 4)}): ${difference ?? 'a name repeats in one list'}; one modulation run needs one category list`, {
        hint: 'sense with a readout whose units are the label categories: group the readout\'s units into the label categories with --readout-map (tune and sense with the same map), or fit readout heads on the baseline (`sonde heads`) and record, tune and sense with that model',
      });
    }
  }
  return { tables, categories: categories!, layers, readoutMap: readoutMap?.tag ?? null };
}

/** A lookup over blocks: column c of the block's [C, K] values. */
function lookupOf<B extends TuningTableBlock | SensitivityTableBlock>(blocks: readonly B[], values: (block: B) => Float64Array): TableLookup {
  const byLayer = new Map(blocks.map((b) => [b.layer, b]));
  return (site, category) => {
    const block = byLayer.get(site);
    if (!block) return undefined;
    const K = block.categories.length;
    const c = block.categories.indexOf(category);
    if (c < 0) return undefined;
    const grid = values(block);
    const column = new Float64Array(block.channels);
    for (let k = 0; k < block.channels; k++) column[k] = grid[k * K + c]!; // [C, K]: i = k*K + c
    return column;
  };
}

function sameSet(a: readonly string[], b: readonly string[]): boolean {
  return a.length === b.length && a.every((x) => b.includes(x));
}
