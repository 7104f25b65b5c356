import { closestHint, UsageError, nameList } from '../../errors.js';
import type { TuningLookup } from '../../compare/diff-types.js';
import { readTuningTable } from '../../snapshot/tables.js';

/**
 * Reads a tuning table and returns, per layer, the tuning values t_k of `target` (undefined for
 * layers the table lacks).
 * @throws UsageError when no layer of the table knows `target` (the known categories are listed).
 */
export function tuningLookup(path: string, target: string): TuningLookup {
  const table = readTuningTable(path);
  const byLayer = new Map(table.blocks.map((block) => [block.layer, block]));
  const categories = [...new Set(table.blocks.flatMap((b) => b.categories))];
  if (!categories.includes(target)) {
    throw new UsageError('E_TARGET', `--target "${target}" is not a category of tuning table ${path} (${nameList(categories)})`, { hint: closestHint(target, categories) || undefined });
  }
  return (layer: string) => {
    const block = byLayer.get(layer);
    if (!block) return undefined;
    const column = block.categories.indexOf(target);
    if (column < 0) return undefined;
    const K = block.categories.length;
    const values = new Float64Array(block.channels);
    for (let k = 0; k < block.channels; k++) values[k] = block.tuning[k * K + column]!; // [C, K] row-major
    return values;
  };
}
