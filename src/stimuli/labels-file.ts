/**
 * Finds the labels files that sit with a stimulus source, so that labels are never lost silently: a
 * folder holding a labels file is read through it (or refused with one line saying what to pass), and
 * a `.npy` array with a labels file beside it is read with it (or refused likewise).
 *
 * A CSV is a labels file by its header (exactly): `path,label` (a listing: which image has which categories),
 * `label` (one row per stimulus, in order, for arrays), or any other header with a column named like
 * a label (`label`, `labels`, `class`, `category`, `categories`, `target`): a labels file in a form
 * Sonde does not read, refused rather than ignored. Other CSVs (e.g. `stimuli compose`'s
 * `sources.csv`) are not labels files.
 */
import { closeSync, openSync, readSync, readdirSync, statSync } from 'node:fs';
import { basename, dirname, extname, join } from 'node:path';
import { UsageError } from '../errors.js';

/** What a CSV's header says it is. */
export type CsvRole = 'listing' | 'rows' | 'foreign-labels' | 'other';

const LABEL_LIKE = new Set(['label', 'labels', 'class', 'classes', 'category', 'categories', 'target', 'targets']);

/** Bytes read to find a CSV's header line. */
const HEADER_BYTES = 64 * 1024;

/**
 * The role of a CSV file from its first line (a byte-order mark and surrounding spaces ignored,
 * column names compared in lower case).
 */
export function csvRole(path: string): { role: CsvRole; header: string } {
  const header = readFirstLine(path);
  const columns = header.split(',').map((c) => c.trim().replace(/^"(.*)"$/, '$1').trim());
  if (columns.length === 2 && columns[0] === 'path' && columns[1] === 'label') return { role: 'listing', header };
  if (columns.length === 1 && columns[0] === 'label') return { role: 'rows', header };
  if (columns.some((c) => LABEL_LIKE.has(c.toLowerCase()))) return { role: 'foreign-labels', header };
  return { role: 'other', header };
}

function readFirstLine(path: string): string {
  let fd: number;
  try {
    fd = openSync(path, 'r');
  } catch (error) {
    throw new UsageError('E_STIMULI_LABELS', `cannot read ${path} to see whether it is a labels file: ${(error as Error).message}`, { hint: 'make it readable, or move it out of the stimuli folder' });
  }
  try {
    const buffer = Buffer.alloc(HEADER_BYTES);
    const n = readSync(fd, buffer, 0, HEADER_BYTES, 0);
    const text = buffer.subarray(0, n).toString('utf8').replace(/^\uFEFF/, '');
    return text.split(/\r?\n|\r/, 1)[0] ?? '';
  } finally {
    closeSync(fd);
  }
}

/** A labels file found with a source. */
export interface FoundLabels {
  /** Absolute path. */
  path: string;
  role: Exclude<CsvRole, 'other'>;
  /** Its first line, for messages. */
  header: string;
}

/** The labels files at the top level of `folder` (regular `.csv` files whose header names labels), sorted by name. */
export function labelsFilesIn(folder: string): FoundLabels[] {
  const found: FoundLabels[] = [];
  for (const name of readdirSync(folder).sort()) {
    if (extname(name).toLowerCase() !== '.csv') continue;
    const path = join(folder, name);
    if (!statSync(path).isFile()) continue; // a FIFO or device is never opened; a folder named x.csv is not a file
    const { role, header } = csvRole(path);
    if (role !== 'other') found.push({ path, role, header });
  }
  return found;
}

/**
 * Labels files beside an array `file.npy`: `labels.csv`, `file.labels.csv`, `file-labels.csv`,
 * `file_labels.csv` and `file.csv` in its folder, those that exist as regular files.
 */
export function labelsFilesBeside(npyPath: string): FoundLabels[] {
  const folder = dirname(npyPath);
  const stem = basename(npyPath, extname(npyPath));
  const names = [...new Set(['labels.csv', `${stem}.labels.csv`, `${stem}-labels.csv`, `${stem}_labels.csv`, `${stem}.csv`])];
  const found: FoundLabels[] = [];
  for (const name of names) {
    const path = join(folder, name);
    let regular = false;
    try {
      regular = statSync(path).isFile();
    } catch {
      regular = false;
    }
    if (!regular) continue;
    const { role, header } = csvRole(path);
    found.push({ path, role: role === 'other' ? 'foreign-labels' : role, header });
  }
  return found;
}
