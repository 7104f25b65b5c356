/**
 * The two per-channel table files: tuning tables (`sonde tune`) and sensitivity tables (`sonde sense`).
 * Both are long-format Arrow IPC *file*s — one row per (layer, channel, category), one record batch per
 * layer — so that Polars, pyarrow or apache-arrow read them as plain tables. Files are written under a
 * temporary name and renamed when complete (see `arrow-sink.ts`).
 *
 * Tuning table columns: `layer` utf8, `channel` int32, `category` utf8, `mean` float64, `sem` float64,
 * `n` int32, `tuning` float64, and per channel (repeated on each of its rows) `preferred` utf8 (null when
 * the channel has no preference), `selectivity` float64, `zero_variance` bool.
 *
 * Sensitivity table columns: `layer` utf8 (the site tensor), `channel` int32, `category` utf8 (readout
 * category), `sensitivity` float64, `fd_error` float64 (the curvature the step sees within ±h, not an
 * error bound), `kind` utf8 (`gain` / `offset`), `step` float64, `n` int32 (stimuli averaged); the
 * method (`exact` gradients, or finite differences `richardson` / `secant`) is in the schema metadata `sonde.method`.
 *
 * Schema metadata: `sonde.table` (`tuning` / `sensitivity`), `sonde.format` (`1`), `sonde.categories`
 * (JSON list: the category order), `sonde.layers` (JSON list of `{name, depth, op}` in file order), plus
 * free-form `sonde.*` keys the writer is given (model, readout, snapshot).
 */
import { INPUT_LIMITS, readInputFile } from '../disk/input-file.js';
import {
  Bool, DataType, Field, Float64, Int32, makeData, RecordBatch, RecordBatchFileWriter, Schema, Struct, tableFromIPC, Type, Utf8, vectorFromArray,
  type Data, type Table,
} from 'apache-arrow';
import { nameList, SondeError, UsageError } from '../errors.js';
import { HashingFileSink } from './arrow-sink.js';
import type { ReadoutMapTag } from '../graph/category-map.js';

/** Version of the table layout written by this build. */
export const TABLE_FORMAT_VERSION = '1';

/**
 * Schema metadata key of the readout map a table was made under (`--readout-map`): JSON
 * `{"name": …, "sha256": …}`; absent when the sidecar's units were the categories.
 */
export const READOUT_MAP_KEY = 'sonde.readout_map';

/**
 * The readout map a table records, or null when it records none.
 * @throws UsageError when the key holds something other than `{name, sha256}` strings.
 */
export function tableReadoutMap(table: Pick<TableFile<unknown>, 'path' | 'metadata'>): ReadoutMapTag | null {
  const text = table.metadata[READOUT_MAP_KEY];
  if (text === undefined) return null;
  let value: unknown;
  try {
    value = JSON.parse(text);
  } catch {
    value = null;
  }
  const tag = value as Partial<ReadoutMapTag> | null;
  if (!tag || typeof tag.name !== 'string' || typeof tag.sha256 !== 'string') throw new UsageError('E_TABLE', `table ${table.path}: metadata ${READOUT_MAP_KEY} is not {"name", "sha256"} (${text.slice(0, 80)})`);
  return { name: tag.name, sha256: tag.sha256 };
}

/** Where a layer sits in its network (for ordering by depth). */
export interface TableLayerInfo {
  name: string;
  /** Depth among the model's recordable tensors (0-based); −1 when unknown. */
  depth: number;
  /** Operator type of the producing node; '' when unknown. */
  op: string;
}

/** One layer of a tuning table. Arrays [C, K] are row-major: channel k, category c at k*K + c. */
export interface TuningTableBlock {
  /** The layer (tensor) name. */
  layer: string;
  /** Depth and operator of the layer, when known. */
  depth?: number;
  op?: string;
  /** C. */
  channels: number;
  /** The K categories, in column order. */
  categories: string[];
  /** Mean response r_kc over the stimuli containing c, [C, K]. */
  mean: Float64Array;
  /** Standard error of r_kc, [C, K] (NaN when n < 2). */
  sem: Float64Array;
  /** Stimuli per category, [K]. */
  count: Int32Array;
  /** Tuning value t_kc (z-score across categories), [C, K]. */
  tuning: Float64Array;
  /** Preferred category index per channel, −1 for none, [C]. */
  preferred: Int32Array;
  /** Selectivity index per channel, [C]. */
  selectivity: Float64Array;
  /** 1 where the channel has zero variance across categories, [C]. */
  zeroVariance: Uint8Array;
}

/** One site of a sensitivity table. Arrays [C, K] are row-major: channel k, category c at k*K + c. */
export interface SensitivityTableBlock {
  /** The site tensor name. */
  layer: string;
  depth?: number;
  op?: string;
  /** C. */
  channels: number;
  /** The K readout categories, in column order. */
  categories: string[];
  /** ∂y_c/∂g_k at g = 1 (kind gain) or ∂y_c/∂b_k at b = 0 (kind offset), averaged over stimuli, [C, K]. */
  sensitivity: Float64Array;
  /** Curvature the step sees within ±h, |D₊ − D₋| / 2 from the one-sided differences (not an error bound), [C, K]. */
  fdError: Float64Array;
  kind: 'gain' | 'offset';
  /** The step h (Richardson also ran at h/2; 0 for exact gradients; the method is in the schema metadata `sonde.method`). */
  step: number;
  /** Stimuli averaged per category, [K]. */
  count: Int32Array;
}

/** A table file read back. */
export interface TableFile<B> {
  /** The file path as given. */
  path: string;
  /** Category order (from the metadata, else order of first appearance). */
  categories: string[];
  /** Layers in file order. */
  blocks: B[];
  /** The block of a layer, or undefined. */
  block(layer: string): B | undefined;
  /** Schema metadata (`sonde.*` keys). */
  metadata: Record<string, string>;
}

const TUNING_FIELDS = [
  new Field('layer', new Utf8(), false),
  new Field('channel', new Int32(), false),
  new Field('category', new Utf8(), false),
  new Field('mean', new Float64(), false),
  new Field('sem', new Float64(), false),
  new Field('n', new Int32(), false),
  new Field('tuning', new Float64(), false),
  new Field('preferred', new Utf8(), true),
  new Field('selectivity', new Float64(), false),
  new Field('zero_variance', new Bool(), false),
];

const SENSITIVITY_FIELDS = [
  new Field('layer', new Utf8(), false),
  new Field('channel', new Int32(), false),
  new Field('category', new Utf8(), false),
  new Field('sensitivity', new Float64(), false),
  new Field('fd_error', new Float64(), false),
  new Field('kind', new Utf8(), false),
  new Field('step', new Float64(), false),
  new Field('n', new Int32(), false),
];

/**
 * Writes a tuning table file (one record batch per block, rows channel-major: k, then c).
 * @param path the `.arrow` file to write (replaced atomically).
 * @param blocks one block per layer; all must share one category list.
 * @param metadata extra schema metadata (keys should start with `sonde.`).
 * @returns file size in bytes and row count.
 * @throws UsageError when blocks disagree on categories or an array has the wrong length; RuntimeFailure
 *   when the file cannot be written.
 */
export function writeTuningTable(path: string, blocks: readonly TuningTableBlock[], metadata: Record<string, string> = {}): { bytes: number; rows: number } {
  const categories = sharedCategories(blocks, path);
  const schema = new Schema(TUNING_FIELDS, tableMetadata('tuning', categories, blocks, metadata));
  return writeBatches(path, schema, blocks.map((block) => () => {
    const { channels: C } = block;
    const K = categories.length;
    checkLengths(block.layer, path, C, K, { mean: block.mean, sem: block.sem, tuning: block.tuning }, { preferred: block.preferred, selectivity: block.selectivity, zeroVariance: block.zeroVariance }, block.count);
    const rows = C * K;
    const channel = new Int32Array(rows);
    const n = new Int32Array(rows);
    const selectivity = new Float64Array(rows);
    const preferred: (string | null)[] = new Array<string | null>(rows);
    const zero: boolean[] = new Array<boolean>(rows);
    const category: string[] = new Array<string>(rows);
    for (let k = 0; k < C; k++) {
      const p = block.preferred[k]!;
      const name = p >= 0 && p < K ? categories[p]! : null;
      for (let c = 0; c < K; c++) {
        const i = k * K + c; // row of (k, c) = index into the [C, K] arrays
        channel[i] = k;
        category[i] = categories[c]!;
        n[i] = block.count[c]!;
        selectivity[i] = block.selectivity[k]!;
        preferred[i] = name;
        zero[i] = block.zeroVariance[k] === 1;
      }
    }
    return [
      utf8Column(new Array<string>(rows).fill(block.layer)),
      int32Column(channel),
      utf8Column(category),
      float64Column(block.mean),
      float64Column(block.sem),
      int32Column(n),
      float64Column(block.tuning),
      utf8Column(preferred),
      float64Column(selectivity),
      vectorFromArray(zero, new Bool()).data[0]!,
    ];
  }));
}

/**
 * Writes a sensitivity table file (one record batch per site, rows channel-major).
 * @param path the `.arrow` file to write (replaced atomically).
 * @param blocks one block per site; all must share one category list.
 * @param metadata extra schema metadata (e.g. `sonde.readout`, `sonde.model`).
 * @returns file size in bytes and row count.
 * @throws UsageError when blocks disagree on categories or an array has the wrong length; RuntimeFailure
 *   when the file cannot be written.
 */
export function writeSensitivityTable(path: string, blocks: readonly SensitivityTableBlock[], metadata: Record<string, string> = {}): { bytes: number; rows: number } {
  const categories = sharedCategories(blocks, path);
  const schema = new Schema(SENSITIVITY_FIELDS, tableMetadata('sensitivity', categories, blocks, metadata));
  return writeBatches(path, schema, blocks.map((block) => () => {
    const { channels: C } = block;
    const K = categories.length;
    checkLengths(block.layer, path, C, K, { sensitivity: block.sensitivity, fdError: block.fdError }, {}, block.count);
    const rows = C * K;
    const channel = new Int32Array(rows);
    const n = new Int32Array(rows);
    const category: string[] = new Array<string>(rows);
    for (let k = 0; k < C; k++) {
      for (let c = 0; c < K; c++) {
        const i = k * K + c;
        channel[i] = k;
        category[i] = categories[c]!;
        n[i] = block.count[c]!;
      }
    }
    return [
      utf8Column(new Array<string>(rows).fill(block.layer)),
      int32Column(channel),
      utf8Column(category),
      float64Column(block.sensitivity),
      float64Column(block.fdError),
      utf8Column(new Array<string>(rows).fill(block.kind)),
      float64Column(new Float64Array(rows).fill(block.step)),
      int32Column(n),
    ];
  }));
}

/**
 * Reads a tuning table file written by `writeTuningTable` (or any Arrow file with its columns).
 * @param path the `.arrow` file.
 * @returns the blocks, one per layer in file order, and the category order.
 * @throws UsageError when the file is missing, not an Arrow IPC file, lacks a column or has one of the
 *   wrong type, is a sensitivity table, or a layer's rows do not form a complete channel × category grid.
 */
export function readTuningTable(path: string): TableFile<TuningTableBlock> {
  const { table, metadata } = readArrow(path, 'tuning');
  const columns = requireColumns(table, path, TUNING_FIELDS);
  return groupBlocks(path, table.numRows, columns, metadata, (layer, info, grid) => {
    const { C, K, rowOf } = grid;
    const mean = new Float64Array(C * K);
    const sem = new Float64Array(C * K);
    const tuning = new Float64Array(C * K);
    const count = new Int32Array(K);
    const preferred = new Int32Array(C).fill(-1);
    const selectivity = new Float64Array(C);
    const zeroVariance = new Uint8Array(C);
    for (let k = 0; k < C; k++) {
      for (let c = 0; c < K; c++) {
        const row = rowOf[k * K + c]!;
        mean[k * K + c] = num(columns['mean']!, row);
        sem[k * K + c] = num(columns['sem']!, row);
        tuning[k * K + c] = num(columns['tuning']!, row);
        if (k === 0) count[c] = num(columns['n']!, row);
        if (c === 0) {
          const p = columns['preferred']!.get(row) as string | null;
          preferred[k] = p === null ? -1 : grid.categories.indexOf(p);
          selectivity[k] = num(columns['selectivity']!, row);
          zeroVariance[k] = columns['zero_variance']!.get(row) === true ? 1 : 0;
        }
      }
    }
    return { layer, ...info, channels: C, categories: grid.categories, mean, sem, count, tuning, preferred, selectivity, zeroVariance };
  });
}

/**
 * Reads a sensitivity table file written by `writeSensitivityTable`.
 * @param path the `.arrow` file.
 * @returns the blocks, one per site in file order, and the category order.
 * @throws UsageError as `readTuningTable`, and when a site mixes kinds or steps.
 */
export function readSensitivityTable(path: string): TableFile<SensitivityTableBlock> {
  const { table, metadata } = readArrow(path, 'sensitivity');
  const columns = requireColumns(table, path, SENSITIVITY_FIELDS);
  return groupBlocks(path, table.numRows, columns, metadata, (layer, info, grid) => {
    const { C, K, rowOf } = grid;
    const sensitivity = new Float64Array(C * K);
    const fdError = new Float64Array(C * K);
    const count = new Int32Array(K);
    const first = rowOf[0]!;
    const kind = columns['kind']!.get(first) as string;
    const step = num(columns['step']!, first);
    if (kind !== 'gain' && kind !== 'offset') throw new UsageError('E_TABLE', `sensitivity table ${path}: layer "${layer}" has kind "${kind}"; expected gain or offset`);
    for (let k = 0; k < C; k++) {
      for (let c = 0; c < K; c++) {
        const row = rowOf[k * K + c]!;
        sensitivity[k * K + c] = num(columns['sensitivity']!, row);
        fdError[k * K + c] = num(columns['fd_error']!, row);
        if (k === 0) count[c] = num(columns['n']!, row);
        if (columns['kind']!.get(row) !== kind || num(columns['step']!, row) !== step) {
          throw new UsageError('E_TABLE', `sensitivity table ${path}: layer "${layer}" mixes kinds or step sizes (row ${row}); write one table per setting`);
        }
      }
    }
    return { layer, ...info, channels: C, categories: grid.categories, sensitivity, fdError, kind, step, count };
  });
}

// ---------------------------------------------------------------------------------------------------

interface Column {
  get(index: number): unknown;
}

function num(column: Column, row: number): number {
  const value = column.get(row);
  return value === null || value === undefined ? Number.NaN : Number(value);
}

function sharedCategories(blocks: readonly { layer: string; categories: readonly string[] }[], path: string): string[] {
  if (blocks.length === 0) throw new UsageError('E_TABLE', `cannot write ${path}: the table has no layers`);
  const first = blocks[0]!.categories;
  if (first.length === 0) throw new UsageError('E_TABLE', `cannot write ${path}: layer "${blocks[0]!.layer}" has no categories`);
  const seen = new Set<string>();
  for (const b of blocks) {
    if (b.categories.length !== first.length || b.categories.some((c, i) => c !== first[i])) {
      throw new UsageError('E_TABLE', `cannot write ${path}: layer "${b.layer}" has ${b.categories.length} categories (${nameList(b.categories, 4)}) but "${blocks[0]!.layer}" has ${first.length} (${nameList(first, 4)})`);
    }
    if (seen.has(b.layer)) throw new UsageError('E_TABLE', `cannot write ${path}: layer "${b.layer}" appears twice`);
    seen.add(b.layer);
  }
  return [...first];
}

function tableMetadata(kind: 'tuning' | 'sensitivity', categories: string[], blocks: readonly { layer: string; depth?: number; op?: string }[], extra: Record<string, string>): Map<string, string> {
  const layers: TableLayerInfo[] = blocks.map((b) => ({ name: b.layer, depth: b.depth ?? -1, op: b.op ?? '' }));
  return new Map([
    ...Object.entries(extra),
    ['sonde.table', kind],
    ['sonde.format', TABLE_FORMAT_VERSION],
    ['sonde.categories', JSON.stringify(categories)],
    ['sonde.layers', JSON.stringify(layers)],
  ]);
}

function checkLengths(layer: string, path: string, C: number, K: number, grid: Record<string, ArrayLike<number>>, perChannel: Record<string, ArrayLike<number>>, count: ArrayLike<number>): void {
  if (!Number.isSafeInteger(C) || C < 1) throw new UsageError('E_TABLE', `cannot write ${path}: layer "${layer}" has ${C} channels`);
  for (const [name, values] of Object.entries(grid)) {
    if (values.length !== C * K) throw new UsageError('E_TABLE', `cannot write ${path}: layer "${layer}" ${name} has ${values.length} values, expected channels × categories = ${C} × ${K}`);
  }
  for (const [name, values] of Object.entries(perChannel)) {
    if (values.length !== C) throw new UsageError('E_TABLE', `cannot write ${path}: layer "${layer}" ${name} has ${values.length} values, expected ${C} (one per channel)`);
  }
  if (count.length !== K) throw new UsageError('E_TABLE', `cannot write ${path}: layer "${layer}" has ${count.length} counts, expected ${K} (one per category)`);
}

function writeBatches(path: string, schema: Schema, batches: Array<() => Data[]>): { bytes: number; rows: number } {
  const sink = new HashingFileSink(path, { unique: true });
  const writer = new RecordBatchFileWriter();
  let rows = 0;
  try {
    // inside the try: the writer's first bytes can fail too (a full disk), and must not leave the temporary file
    writer.reset(sink, schema);
    for (const build of batches) {
      const children = build();
      const length = children[0]!.length;
      const struct = makeData({ type: new Struct(schema.fields), length, nullCount: 0, children });
      writer.write(new RecordBatch(schema, struct));
      rows += length;
    }
    writer.finish();
    writer.close();
    return { bytes: sink.commit().bytes, rows };
  } catch (error) {
    sink.discard();
    throw error;
  }
}

function utf8Column(values: (string | null)[]): Data {
  return vectorFromArray(values, new Utf8()).data[0]!;
}

function int32Column(values: Int32Array): Data {
  return makeData({ type: new Int32(), length: values.length, nullCount: 0, data: values });
}

function float64Column(values: Float64Array): Data {
  return makeData({ type: new Float64(), length: values.length, nullCount: 0, data: values });
}

function readArrow(path: string, kind: 'tuning' | 'sensitivity'): { table: Table; metadata: Record<string, string> } {
  let bytes: Buffer;
  try {
    bytes = readInputFile(path, `${kind} table ${path}`, INPUT_LIMITS.table);
  } catch (error) {
    if (error instanceof SondeError) throw error;
    throw new UsageError('E_TABLE_MISSING', `${kind} table ${path} does not exist or cannot be read`, { hint: kind === 'tuning' ? 'make one with `sonde tune SNAPSHOT --out FILE.arrow`' : 'make one with `sonde sense MODEL ... --out FILE.arrow`' });
  }
  let table: Table;
  try {
    table = tableFromIPC(bytes);
  } catch (error) {
    throw new UsageError('E_TABLE', `${kind} table ${path} is not an Arrow IPC file (${(error as Error).message.split('\n')[0]})`);
  }
  const metadata: Record<string, string> = {};
  for (const [key, value] of table.schema.metadata) metadata[key] = value;
  const declared = metadata['sonde.table'];
  if (declared !== undefined && declared !== kind) {
    throw new UsageError('E_TABLE', `${path} is a ${declared} table, not a ${kind} table`, { hint: declared === 'tuning' ? 'pass it with --tuning' : 'pass it with --sensitivity' });
  }
  if (table.numRows === 0) throw new UsageError('E_TABLE', `${kind} table ${path} has no rows`);
  return { table, metadata };
}

function requireColumns(table: Table, path: string, fields: readonly Field[]): Record<string, Column> {
  const columns: Record<string, Column> = {};
  const present = table.schema.fields.map((f) => f.name);
  for (const field of fields) {
    const column = table.getChild(field.name);
    if (!column) throw new UsageError('E_TABLE', `table ${path} lacks the "${field.name}" column (has ${present.join(', ')})`);
    const actual = table.schema.fields.find((f) => f.name === field.name)!.type;
    if (!sameTypeFamily(actual, field.type)) throw new UsageError('E_TABLE', `table ${path}: column "${field.name}" is ${String(actual)}, expected ${String(field.type)}`);
    columns[field.name] = column;
  }
  return columns;
}

/**
 * Whether a column written by another tool can stand for the expected type: any string encoding
 * (utf8, large utf8, string view, or a dictionary of strings — Polars' categoricals) for utf8, any
 * integer width for int32, any float width for float64, bool for bool.
 */
function sameTypeFamily(actual: DataType, expected: DataType): boolean {
  const family = (type: DataType): number => {
    if (DataType.isDictionary(type)) return family(type.dictionary);
    if (type.typeId === Type.LargeUtf8 || type.typeId === Type.Utf8View) return Type.Utf8;
    return type.typeId;
  };
  return family(actual) === family(expected);
}

interface Grid {
  C: number;
  K: number;
  categories: string[];
  /** Row index of (channel k, category c) at k*K + c. */
  rowOf: Int32Array;
}

function groupBlocks<B>(
  path: string,
  rows: number,
  columns: Record<string, Column>,
  metadata: Record<string, string>,
  build: (layer: string, info: { depth?: number; op?: string }, grid: Grid) => B,
): TableFile<B> {
  const declaredCategories = parseJsonList<string>(metadata['sonde.categories']);
  const layerInfo = new Map((parseJsonList<TableLayerInfo>(metadata['sonde.layers']) ?? []).map((l) => [l.name, l]));
  const layerRows = new Map<string, number[]>();
  const firstSeen: string[] = [];
  for (let row = 0; row < rows; row++) {
    const layer = columns['layer']!.get(row) as string | null;
    const category = columns['category']!.get(row) as string | null;
    if (layer === null || category === null) throw new UsageError('E_TABLE', `table ${path}: row ${row} has no layer or category`);
    let list = layerRows.get(layer);
    if (!list) layerRows.set(layer, (list = []));
    list.push(row);
    if (!firstSeen.includes(category)) firstSeen.push(category);
  }
  const categories = declaredCategories && firstSeen.every((c) => declaredCategories.includes(c)) ? declaredCategories.filter((c) => firstSeen.includes(c)) : firstSeen;
  const K = categories.length;
  const categoryIndex = new Map(categories.map((c, i) => [c, i]));
  const blocks: B[] = [];
  for (const [layer, list] of layerRows) {
    let C = 0;
    for (const row of list) C = Math.max(C, num(columns['channel']!, row) + 1);
    if (list.length !== C * K) {
      throw new UsageError('E_TABLE', `table ${path}: layer "${layer}" has ${list.length} rows, expected channels × categories = ${C} × ${K} (an incomplete table?)`);
    }
    const rowOf = new Int32Array(C * K).fill(-1);
    for (const row of list) {
      const k = num(columns['channel']!, row);
      const c = categoryIndex.get(columns['category']!.get(row) as string)!;
      if (!Number.isInteger(k) || k < 0) throw new UsageError('E_TABLE', `table ${path}: layer "${layer}" row ${row} has channel ${k}`);
      if (rowOf[k * K + c] !== -1) throw new UsageError('E_TABLE', `table ${path}: layer "${layer}" has channel ${k}, category "${categories[c]}" twice`);
      rowOf[k * K + c] = row;
    }
    const info = layerInfo.get(layer);
    blocks.push(build(layer, info && info.depth >= 0 ? { depth: info.depth, op: info.op } : {}, { C, K, categories, rowOf }));
  }
  const byLayer = new Map(blocks.map((b, i) => [[...layerRows.keys()][i]!, b]));
  return { path, categories, blocks, block: (layer) => byLayer.get(layer), metadata };
}

function parseJsonList<T>(text: string | undefined): T[] | undefined {
  if (text === undefined) return undefined;
  try {
    const value: unknown = JSON.parse(text);
    return Array.isArray(value) ? (value as T[]) : undefined;
  } catch {
    return undefined;
  }
}
