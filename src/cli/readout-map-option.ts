/**
 * `--readout-map FILE|INLINE`, the one option diff, tune, sense, sweep and size-matched share for
 * grouping readout units into stimulus categories at analysis time (src/graph/category-map.ts).
 */
import { readReadoutMap, type ReadoutMap } from '../graph/category-map.js';

/** The option's flags. */
export const READOUT_MAP_FLAGS = '--readout-map <file.json|inline>';

/** The option's help text. */
export const READOUT_MAP_HELP =
  'group readout units into stimulus categories (default: the sidecar, one unit per category): a JSON file {"dog": ["151..268"], "cat": [281, "tabby"]} or inline dog=151..268;cat=281,282; a unit is an index, a range A..B or a sidecar unit name; a category scores the log-sum-exp of its units (the log of its summed softmax probability, up to a normaliser shared by all categories); units not listed are ignored';

/** The map of an option value, or undefined when the option was not given. */
export function readoutMapOption(value: string | undefined): ReadoutMap | undefined {
  return value === undefined ? undefined : readReadoutMap(value);
}
