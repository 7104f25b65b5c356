import type { TuningLookup } from '../../pipeline/diff-snapshots.js';
import { UsageError } from '../../errors.js';

/** Reads a tuning table and returns per-layer tuning values for `target`. (Wired to the table reader.) */
export function tuningLookup(path: string, target: string): TuningLookup {
  throw new UsageError('E_TUNING', `--tuning ${path} (target ${target}): tuning tables are not readable in this build yet`);
}
