import { tableFromArrays, tableToIPC } from 'apache-arrow';
import { replaceFile } from '../disk/atomic-file.js';

/** Detection at one operating point, as a sweep row stores it. */
export interface SweepTableDetection {
  hitRate: number;
  falseAlarmRate: number;
  dPrime: number;
  criterion: number;
  accuracy: number;
  auc: number;
}

/**
 * The fields of a sweep cell the table stores (a `SweepCell` of src/replay/sweep-types.ts has them all;
 * the file format is defined here, below the code that fills it).
 */
export interface SweepTableRow {
  site: string;
  scheme: string;
  category: string;
  strength: number;
  seed: number;
  base: SweepTableDetection;
  mod: SweepTableDetection;
  change: { dPrime: number; accuracyPp: number; auc: number; matchedHitRatePp: number };
  criterionControl: { hitRatePp: number; dPrime: number };
  siteActivityChange: number;
}

/**
 * Writes sweep cells as an Arrow IPC file, one row per cell: `site`, `scheme`, `category` utf8,
 * `strength` float64, `seed` int32, `base_*` and `mod_*` (hit_rate, false_alarm_rate, d_prime,
 * criterion, accuracy, auc) float64, `d_prime_change`, `accuracy_change_pp`, `auc_change`,
 * `matched_hit_rate_change_pp`, `criterion_control_hit_rate_pp`, `criterion_control_d_prime`,
 * `site_activity_change` float64.
 * Written under a temporary name, fsynced and renamed (`replaceFile`).
 */
export function writeSweepTable(path: string, cells: readonly SweepTableRow[], metadata: Record<string, string> = {}): void {
  const f64 = (pick: (c: SweepTableRow) => number) => Float64Array.from(cells, pick);
  const table = tableFromArrays({
    site: cells.map((c) => c.site),
    scheme: cells.map((c) => c.scheme),
    category: cells.map((c) => c.category),
    strength: f64((c) => c.strength),
    seed: Int32Array.from(cells, (c) => c.seed),
    base_hit_rate: f64((c) => c.base.hitRate),
    base_false_alarm_rate: f64((c) => c.base.falseAlarmRate),
    base_d_prime: f64((c) => c.base.dPrime),
    base_criterion: f64((c) => c.base.criterion),
    base_accuracy: f64((c) => c.base.accuracy),
    base_auc: f64((c) => c.base.auc),
    mod_hit_rate: f64((c) => c.mod.hitRate),
    mod_false_alarm_rate: f64((c) => c.mod.falseAlarmRate),
    mod_d_prime: f64((c) => c.mod.dPrime),
    mod_criterion: f64((c) => c.mod.criterion),
    mod_accuracy: f64((c) => c.mod.accuracy),
    mod_auc: f64((c) => c.mod.auc),
    d_prime_change: f64((c) => c.change.dPrime),
    accuracy_change_pp: f64((c) => c.change.accuracyPp),
    auc_change: f64((c) => c.change.auc),
    matched_hit_rate_change_pp: f64((c) => c.change.matchedHitRatePp),
    criterion_control_hit_rate_pp: f64((c) => c.criterionControl.hitRatePp),
    criterion_control_d_prime: f64((c) => c.criterionControl.dPrime),
    site_activity_change: f64((c) => c.siteActivityChange),
  });
  // schema metadata (`sonde.*` keys, e.g. the readout map the cells were scored under)
  for (const [key, value] of Object.entries(metadata)) table.schema.metadata.set(key, value);
  replaceFile(path, tableToIPC(table, 'file'));
}
