/**
 * Per-channel vectors stored in files: the `values` of a `gain` or `offset` modulation may name a
 * `.npy` or `.csv` file instead of listing numbers inline.
 *
 * CSV format (Sonde's own, kept deliberately small):
 * - UTF-8 (a byte-order mark is ignored); lines end in `\n` or `\r\n`; blank lines and lines whose first
 *   non-space character is `#` are skipped.
 * - Cells are separated by commas and trimmed; a cell wrapped in double quotes loses them.
 * - One column: one number per line, in channel order. The first line may be a header (any text that is
 *   not a number, e.g. `value`); a non-number anywhere else is an error.
 * - Several columns: the first line is a header and must name a `value` column (case-insensitive); the
 *   other columns are ignored, except a `channel` column, which when present must read 0, 1, 2, … (row
 *   order is channel order; the check catches sorted or filtered files).
 * - Numbers are decimal or scientific notation (`-0.5`, `1e-3`); `NaN`, `Inf` and values that overflow a
 *   double are errors, never skipped.
 *
 * `.npy` files (see `src/stimuli/npy.ts`) must hold a float or integer array with exactly one axis longer
 * than 1 (shapes `[C]`, `[1, C]`, `[C, 1]` …); NaN/Inf elements are errors.
 */
import { INPUT_LIMITS, readInputFile } from '../disk/input-file.js';
import { extname } from 'node:path';
import { RuntimeFailure, SondeError, UsageError } from '../errors.js';
import { parseNpy } from '../stimuli/npy.js';

/** File extensions accepted for `values`. */
export const VALUES_FILE_EXTENSIONS = ['.npy', '.csv'] as const;

const NUMBER_PATTERN = /^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$/;
const NON_FINITE_PATTERN = /^[+-]?(nan|inf|infinity)$/i;

/**
 * Reads a vector from a `.npy` or `.csv` file.
 * @param path Absolute (or cwd-relative) path of the file; its extension picks the format.
 * @param label Prefix for messages, naming the spec field, e.g. `spec.yaml: modulations[0].values "g.csv"`.
 * @returns The values as doubles, in channel order.
 * @throws UsageError when the file is missing, has another extension, is malformed, empty, or holds
 *   NaN/Inf; RuntimeFailure when it exists but cannot be read.
 */
export function readValuesFile(path: string, label: string): number[] {
  const extension = extname(path).toLowerCase();
  if (extension !== '.npy' && extension !== '.csv') {
    throw new UsageError('E_SPEC_VALUES', `${label}: values files must end in .npy or .csv, got ${JSON.stringify(extname(path) || path)}`, {
      hint: 'save the vector with numpy.save (float32/float64) or as one number per line in a .csv',
    });
  }
  let bytes: Uint8Array;
  try {
    // a plain copy: parseNpy's `slice` would share memory (and offsets) with a Node Buffer
    bytes = new Uint8Array(readInputFile(path, `${label}: values file ${path}`, INPUT_LIMITS.values));
  } catch (error) {
    if (error instanceof SondeError) throw error;
    const code = error instanceof Error && 'code' in error ? (error as NodeJS.ErrnoException).code : undefined;
    if (code === 'ENOENT' || code === 'ENOTDIR') {
      throw new UsageError('E_SPEC_VALUES', `${label}: file not found (${path})`, {
        hint: 'paths in a spec are relative to the spec file\'s folder',
      });
    }
    if (code === 'EISDIR') throw new UsageError('E_SPEC_VALUES', `${label}: ${path} is a folder, not a file`);
    throw new RuntimeFailure('E_SPEC_VALUES', `${label}: cannot read ${path} (${code ?? String(error)})`, { cause: error });
  }
  return extension === '.npy' ? vectorFromNpy(bytes, label) : parseValuesCsv(new TextDecoder('utf-8').decode(bytes), label);
}

/**
 * Parses a `.npy` file's bytes as a per-channel vector.
 * @throws UsageError when the array is empty, has more than one axis longer than 1, or holds NaN/Inf.
 */
export function vectorFromNpy(bytes: Uint8Array, label: string): number[] {
  const tensor = parseNpy(bytes, label);
  const longAxes = tensor.shape.filter((d) => d !== 1).length;
  if (tensor.data.length === 0) throw new UsageError('E_SPEC_VALUES', `${label}: the array is empty (shape [${tensor.shape.join(', ')}])`);
  if (longAxes > 1) {
    throw new UsageError('E_SPEC_VALUES', `${label}: expected a vector, got an array of shape [${tensor.shape.join(', ')}]`, {
      hint: 'save one value per channel, shape [C]',
    });
  }
  const out = new Array<number>(tensor.data.length);
  for (let i = 0; i < tensor.data.length; i++) {
    const value = tensor.data[i]!;
    if (!Number.isFinite(value)) throw new UsageError('E_SPEC_VALUES', `${label}: element ${i} is ${value}; values must be finite`);
    out[i] = value;
  }
  return out;
}

/**
 * Parses CSV text in the format described at the top of this file.
 * @param text The file's contents.
 * @param label Prefix for messages (names the spec field and the file).
 * @returns The values in row order.
 * @throws UsageError naming the line for a non-number, NaN/Inf, a missing `value` column, a row with the
 *   wrong number of cells, a `channel` column out of order, or a file without values.
 */
export function parseValuesCsv(text: string, label: string): number[] {
  const lines = text.replace(/^\uFEFF/, '').split(/\r?\n/);
  const values: number[] = [];
  let columns = -1; // cells per row, fixed by the first content line
  let valueColumn = 0;
  let channelColumn = -1;
  let first = true;
  for (let index = 0; index < lines.length; index++) {
    const line = lines[index]!.trim();
    if (line.length === 0 || line.startsWith('#')) continue;
    const lineNumber = index + 1;
    const cells = line.split(',').map(unquote);
    if (first) {
      first = false;
      columns = cells.length;
      if (cells.length > 1) {
        const names = cells.map((c) => c.toLowerCase());
        valueColumn = names.indexOf('value');
        if (valueColumn < 0) {
          throw new UsageError('E_SPEC_VALUES', `${label} line ${lineNumber}: a CSV with several columns needs a "value" column, header is ${JSON.stringify(line)}`, {
            hint: 'name the column of numbers "value", or write one number per line',
          });
        }
        channelColumn = names.indexOf('channel');
        continue;
      }
      if (!NUMBER_PATTERN.test(cells[0]!) && !NON_FINITE_PATTERN.test(cells[0]!)) continue; // a one-column header
    }
    if (cells.length !== columns) {
      throw new UsageError('E_SPEC_VALUES', `${label} line ${lineNumber}: expected ${columns} cell(s), got ${cells.length} in ${JSON.stringify(line)}`);
    }
    const value = parseCell(cells[valueColumn]!, `${label} line ${lineNumber}`);
    if (channelColumn >= 0) {
      const channelText = cells[channelColumn]!;
      if (channelText !== String(values.length)) {
        throw new UsageError('E_SPEC_VALUES', `${label} line ${lineNumber}: channel column reads ${JSON.stringify(channelText)}, expected ${values.length}`, {
          hint: 'rows must be in channel order 0, 1, 2, … with none missing',
        });
      }
    }
    values.push(value);
  }
  if (values.length === 0) throw new UsageError('E_SPEC_VALUES', `${label}: the CSV holds no values`);
  return values;
}

function unquote(cell: string): string {
  const trimmed = cell.trim();
  return trimmed.length >= 2 && trimmed.startsWith('"') && trimmed.endsWith('"') ? trimmed.slice(1, -1).trim() : trimmed;
}

function parseCell(cell: string, where: string): number {
  if (NON_FINITE_PATTERN.test(cell)) throw new UsageError('E_SPEC_VALUES', `${where}: ${JSON.stringify(cell)} is not finite; values must be finite numbers`);
  if (!NUMBER_PATTERN.test(cell)) throw new UsageError('E_SPEC_VALUES', `${where}: ${JSON.stringify(cell)} is not a number`);
  const value = Number(cell);
  if (!Number.isFinite(value)) throw new UsageError('E_SPEC_VALUES', `${where}: ${cell} overflows a double; values must be finite numbers`);
  return value;
}
