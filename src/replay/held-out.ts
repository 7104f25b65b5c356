/**
 * Which stimuli a sweep's gains came from and which its detection was measured on. Tuning and
 * sensitivity tables record their source snapshot in their metadata (`sonde.snapshot` from `sonde
 * tune`, `sonde.source` = "baseline FOLDER" from `sonde sense`); comparing it with `--from` says whether
 * the evaluation is held out (gains fitted on one set, measured on another).
 */
import { existsSync, realpathSync } from 'node:fs';
import { resolve } from 'node:path';
import { readSensitivityTable, readTuningTable } from '../snapshot/tables.js';

/** Where a sweep's gains came from and where its detection was measured (`sweep.json` → `evaluation`). */
export interface SweepEvaluation {
  /** The snapshot detection was measured on (`--from`). */
  detectionOn: string;
  /** Each table with the snapshot its values were computed from (null when the table does not say, or came from raw stimuli). */
  tables: Array<{ table: 'tuning' | 'sensitivity'; path: string; from: string | null; source: string | null }>;
  /**
   * true when every table came from a snapshot other than `--from` (held-out evaluation); false when
   * one came from `--from` itself (gains and detection on the same stimuli); null when no table is used
   * or a table's source is unknown.
   */
  heldOut: boolean | null;
}

function same(a: string, b: string): boolean {
  const real = (p: string) => (existsSync(p) ? realpathSync(p) : resolve(p));
  return real(a) === real(b);
}

/**
 * Reads the tables' source metadata and compares it with the detection snapshot.
 * @param from the detection snapshot folder.
 * @param tables paths of the tuning and/or sensitivity tables used.
 * @throws UsageError from the table readers for an unreadable table.
 */
export function describeEvaluation(from: string, tables: { tuning?: string | undefined; sensitivity?: string | undefined }): SweepEvaluation {
  const rows: SweepEvaluation['tables'] = [];
  if (tables.tuning) {
    const source = readTuningTable(tables.tuning).metadata['sonde.snapshot'] ?? null;
    rows.push({ table: 'tuning', path: tables.tuning, from: source, source });
  }
  if (tables.sensitivity) {
    const source = readSensitivityTable(tables.sensitivity).metadata['sonde.source'] ?? null;
    const from = source?.startsWith('baseline ') ? source.slice('baseline '.length) : null;
    rows.push({ table: 'sensitivity', path: tables.sensitivity, from, source });
  }
  let heldOut: boolean | null = rows.length === 0 ? null : true;
  for (const row of rows) {
    if (row.from === null) {
      if (heldOut === true) heldOut = null;
    } else if (same(row.from, from)) heldOut = false;
  }
  return { detectionOn: from, tables: rows, heldOut };
}
