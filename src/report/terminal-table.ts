/**
 * Terminal tables that fit a given width. A table wider than the terminal is split into several
 * tables, each repeating the key columns (a row's name) and taking as many further columns as fit, in
 * order; a key column too wide even alone is shortened with a middle ellipsis. Text lines are wrapped
 * at word boundaries to the same width. Widths are counted in terminal cells (`string-width`).
 */
import Table from 'cli-table3';
import stringWidth from 'string-width';
import { ellipsize } from './layer-labels.js';

/** Below this many columns the narrow layouts are used (fewer columns per table, folded rows). */
export const NARROW_COLUMNS = 100;

const STYLE = { head: [] as string[], border: [] as string[], compact: true };

/** The widest line of a text, in terminal cells. */
export function textWidth(text: string): number {
  let widest = 0;
  for (const line of text.split('\n')) widest = Math.max(widest, stringWidth(line));
  return widest;
}

function draw(head: readonly string[], rows: readonly (readonly string[])[], columns: readonly number[]): string {
  const table = new Table({ head: columns.map((c) => head[c]!), style: STYLE });
  for (const row of rows) table.push(columns.map((c) => row[c] ?? ''));
  return table.toString();
}

/** Options of `fitTable`. */
export interface FitTableOptions {
  /** The most terminal cells a line may take. */
  width: number;
  /** Leading columns repeated in every part (default 1). */
  keyColumns?: number;
}

/**
 * Renders a table within `width` cells, splitting it into parts when it is wider (see the module
 * comment).
 * @param head column headings.
 * @param rows rows of cell text (a missing cell is empty).
 * @param options width and the number of key columns.
 * @returns the table text: one or more tables separated by a blank line; no line wider than `width`
 *   unless `width` is below what one key column and one cell of three characters need.
 */
export function fitTable(head: readonly string[], rows: readonly (readonly string[])[], options: FitTableOptions): string {
  const width = options.width;
  const keys = Math.min(Math.max(0, options.keyColumns ?? 1), head.length);
  let cells = rows.map((r) => [...r]);
  let heads = [...head];
  const keyColumns = Array.from({ length: keys }, (_, i) => i);
  // key columns too wide to leave room for one more column: shorten their longest texts
  const rest = Array.from({ length: head.length - keys }, (_, i) => keys + i);
  const narrowest = rest.length === 0 ? 0 : Math.min(...rest.map((c) => Math.max(stringWidth(heads[c]!), ...cells.map((r) => stringWidth(r[c] ?? ''))) + 3));
  for (let guard = 0; guard < 64 && keys > 0 && textWidth(draw(heads, cells, keyColumns)) + narrowest > width; guard++) {
    const widths = keyColumns.map((c) => Math.max(stringWidth(heads[c]!), ...cells.map((r) => stringWidth(r[c] ?? ''))));
    const widest = widths.indexOf(Math.max(...widths));
    const limit = Math.max(3, widths[widest]! - Math.max(1, textWidth(draw(heads, cells, keyColumns)) + narrowest - width));
    cells = cells.map((r) => r.map((v, c) => (c === widest ? ellipsize(v, limit) : v)));
    heads = heads.map((h, c) => (c === widest ? ellipsize(h, limit) : h));
    if (limit === 3) break;
  }
  if (rest.length === 0) return draw(heads, cells, keyColumns);
  const parts: string[] = [];
  let current: number[] = [];
  for (const column of rest) {
    const trial = [...keyColumns, ...current, column];
    if (current.length > 0 && textWidth(draw(heads, cells, trial)) > width) {
      parts.push(draw(heads, cells, [...keyColumns, ...current]));
      current = [column];
    } else {
      current.push(column);
    }
  }
  parts.push(draw(heads, cells, [...keyColumns, ...current]));
  return parts.join('\n\n');
}

/**
 * Wraps text to `width` cells at spaces; a word longer than the width (a path, a tensor name) is cut
 * across lines so that nothing runs past the edge. Existing line breaks are kept.
 * @param text the text.
 * @param width the most cells per line.
 * @param indent prefix of every line after the first of a paragraph (e.g. two spaces under a bullet).
 * @returns the wrapped text, without a trailing newline.
 */
export function wrapText(text: string, width: number, indent = ''): string {
  const out: string[] = [];
  for (const paragraph of text.split('\n')) {
    // the paragraph's own leading spaces (a bullet's indent) are kept on its first line
    const lead = /^ */.exec(paragraph)![0];
    const words = paragraph.slice(lead.length).split(' ');
    let line = lead;
    for (const word of words) {
      const candidate = line.trim().length === 0 ? `${line}${word}` : `${line} ${word}`;
      if (line.trim().length > 0 && stringWidth(candidate) > width) {
        out.push(line);
        line = `${indent}${word}`;
      } else {
        line = candidate;
      }
    }
    // a single word wider than the line: cut it (paths, tensor names) so nothing runs past the edge
    while (stringWidth(line) > width && [...line].length > indent.length + 1) {
      const chars = [...line];
      let cut = chars.length;
      while (cut > 1 && stringWidth(chars.slice(0, cut).join('')) > width) cut--;
      out.push(chars.slice(0, cut).join(''));
      line = `${indent}${chars.slice(cut).join('')}`;
    }
    out.push(line);
  }
  return out.join('\n');
}
