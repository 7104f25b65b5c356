/**
 * The inputs `sonde report` understands, told apart by their fields (never by file name):
 * - `kind: 'sweep'` → a sweep result (`SweepResult`, `sweep.json`);
 * - `kind: 'size-matched'` → a held-out comparison of schemes at one modulation size (`SizeMatchedComparison`);
 * - `a` and `b` (each a diff) → a scheme comparison (`diff --vs --json`, `SchemeComparison`);
 * - `layers` and `verdict` → a diff (`diff --json`, `DiffReport`);
 * - `depthTrend` → a tuning–sensitivity agreement (`TableComparison`);
 * - `layers` with `selectiveIndex` (the `tune --json` print-out), or `summaries` (a `TuneResult`) → tuning
 *   summaries; a `comparison` field (`tune --against --json`) adds its agreement too.
 * The order matters: a comparison also has `layers` and `verdict`, so it is tested first.
 *
 * JSON turns NaN into null, so every number read from an input may be null at run time; the report
 * reads numbers through `num()` and shows such values as "–".
 */
import { statSync } from 'node:fs';
import { INPUT_LIMITS, readInputText } from '../../disk/input-file.js';
import { basename } from 'node:path';
import { RuntimeFailure, SondeError, UsageError } from '../../errors.js';
import type { TableComparison } from '../../compare/compare-tables.js';
import type { DiffReport, SchemeComparison } from '../../compare/diff-types.js';
import type { SweepResult } from '../../replay/sweep-types.js';
import type { SizeMatchedComparison } from '../../replay/size-matched.js';
import type { LayerTuningSummary } from '../../compare/tune.js';
import { parseJson } from '../../json.js';

/** Tuning summaries as `tune --json` prints them (only `layers` is required). */
export interface TuningSummaries {
  snapshot?: string;
  categories?: string[];
  counts?: Record<string, number>;
  selectiveIndex?: number;
  layers: LayerTuningSummary[];
}

/** One classified input, with the name it is shown under (its file name, or `input N`). */
export type ReportInput =
  | { kind: 'diff'; name: string; diff: DiffReport }
  | { kind: 'comparison'; name: string; comparison: SchemeComparison }
  | { kind: 'sweep'; name: string; sweep: SweepResult }
  | { kind: 'size-matched'; name: string; comparison: SizeMatchedComparison }
  | { kind: 'agreement'; name: string; agreement: TableComparison }
  | { kind: 'tuning'; name: string; tuning: TuningSummaries };

/** A number from an input, or NaN when it is null, missing or not a number (JSON writes NaN as null). */
export function num(value: unknown): number {
  return typeof value === 'number' ? value : Number.NaN;
}

function isRecord(value: unknown): value is Record<string, unknown> {
  return typeof value === 'object' && value !== null && !Array.isArray(value);
}

function fail(name: string, what: string): never {
  throw new UsageError('E_REPORT_INPUT', `${name}: ${what}`, { hint: 'pass the JSON printed by sonde diff --json, sweep, or tune --json' });
}

function requireArray(record: Record<string, unknown>, field: string, name: string, kind: string): unknown[] {
  const value = record[field];
  if (!Array.isArray(value)) fail(name, `looks like a ${kind} but its "${field}" is ${value === undefined ? 'missing' : `not a list (${typeof value})`}`);
  return value;
}

function requireRows(record: Record<string, unknown>, field: string, keys: readonly string[], name: string, kind: string): void {
  const rows = requireArray(record, field, name, kind);
  rows.forEach((row, i) => {
    if (!isRecord(row)) fail(name, `looks like a ${kind} but ${field}[${i}] is not an object`);
    for (const key of keys) if (!(key in row)) fail(name, `looks like a ${kind} but ${field}[${i}] has no "${key}"`);
  });
}

function checkDiff(value: Record<string, unknown>, name: string): DiffReport {
  requireRows(value, 'layers', ['name', 'depth', 'relativeChange'], name, 'diff');
  requireArray(value, 'sites', name, 'diff');
  if (typeof value['verdict'] !== 'string') fail(name, 'looks like a diff but its "verdict" is not text');
  return value as unknown as DiffReport;
}

/**
 * Classifies one parsed input by its fields (see the module comment).
 * @param value the parsed JSON (or an object returned by the library).
 * @param name what the page calls it (file name); also names it in errors.
 * @returns one or two classified inputs (tuning summaries with a `comparison` give both).
 * @throws UsageError (exit 2) naming the input when it is none of the known kinds, or a known kind
 *   lacks a field the report needs.
 */
export function classifyReportInput(value: unknown, name: string): ReportInput[] {
  if (!isRecord(value)) fail(name, `is not a Sonde result (a JSON ${Array.isArray(value) ? 'list' : value === null ? 'null' : typeof value}, expected an object)`);
  if (value['kind'] === 'sweep') {
    requireRows(value, 'cells', ['site', 'scheme', 'strength', 'category', 'change'], name, 'sweep');
    for (const field of ['sites', 'schemes', 'strengths']) requireArray(value, field, name, 'sweep');
    return [{ kind: 'sweep', name, sweep: value as unknown as SweepResult }];
  }
  if (value['kind'] === 'size-matched') {
    requireRows(value, 'effects', ['site', 'scheme', 'aucChange'], name, 'size-matched comparison');
    return [{ kind: 'size-matched', name, comparison: value as unknown as SizeMatchedComparison }];
  }
  if (isRecord(value['a']) && isRecord(value['b'])) {
    const a = checkDiff(value['a'], `${name} (side A)`);
    const b = checkDiff(value['b'], `${name} (side B)`);
    requireRows(value, 'layers', ['name', 'a', 'b'], name, 'scheme comparison');
    return [{ kind: 'comparison', name, comparison: { ...(value as unknown as SchemeComparison), a, b } }];
  }
  if ('layers' in value && 'verdict' in value) return [{ kind: 'diff', name, diff: checkDiff(value, name) }];
  if ('depthTrend' in value) {
    requireRows(value, 'layers', ['layer', 'depth', 'pooled'], name, 'tuning–sensitivity agreement');
    requireArray(value, 'categories', name, 'tuning–sensitivity agreement');
    return [{ kind: 'agreement', name, agreement: value as unknown as TableComparison }];
  }
  const summaries = Array.isArray(value['summaries']) ? 'summaries' : 'selectiveIndex' in value ? 'layers' : null;
  if (summaries !== null) {
    requireRows(value, summaries, ['layer', 'depth', 'selectiveFraction'], name, 'tuning summary');
    const tuning: TuningSummaries = { ...(value as unknown as TuningSummaries), layers: value[summaries] as LayerTuningSummary[] };
    const out: ReportInput[] = [{ kind: 'tuning', name, tuning }];
    if (isRecord(value['comparison'])) out.push(...classifyReportInput(value['comparison'], `${name} (comparison)`));
    return out;
  }
  const fields = Object.keys(value).slice(0, 6).map((k) => JSON.stringify(k)).join(', ');
  fail(name, `is not a Sonde diff, sweep, agreement or tuning result (top-level fields: ${fields || 'none'})`);
}

/**
 * Reads and classifies one JSON file.
 * @param path the file.
 * @returns its classified inputs, named by the file's base name.
 * @throws UsageError when the file is missing, a folder, not JSON, or not a known kind; RuntimeFailure
 *   when it exists but cannot be read.
 */
export function readReportInput(path: string): ReportInput[] {
  const name = basename(path);
  let text: string;
  try {
    if (statSync(path).isDirectory()) throw new UsageError('E_REPORT_INPUT', `${path} is a folder, not a JSON result`, { hint: 'pass the JSON file (sonde diff --json > diff.json, or sweep.json inside the sweep folder)' });
    text = readInputText(path, `report input ${path}`, INPUT_LIMITS.report);
  } catch (error) {
    if (error instanceof SondeError) throw error;
    const code = (error as NodeJS.ErrnoException).code;
    if (code === 'ENOENT') throw new UsageError('E_REPORT_INPUT', `${path} does not exist`, { hint: 'check the path' });
    throw new RuntimeFailure('E_REPORT_READ', `cannot read ${path} (${code ?? String(error)})`, { cause: error });
  }
  let value: unknown;
  try {
    value = parseJson(text);
  } catch (error) {
    throw new UsageError('E_REPORT_INPUT', `${path} is not JSON (${(error as Error).message.split('\n')[0]})`, { hint: 'pass the output of --json, not the terminal table' });
  }
  return classifyReportInput(value, name);
}
