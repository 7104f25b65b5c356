/**
 * The word a table uses for the units of its layers: "channel" for feature maps and vectors, "feature"
 * for token tensors (one unit is a feature over all tokens), "head" where the values are per head; a
 * table mixing them says "unit" and explains the word once under it. Chosen from each layer's layout
 * the same way `tune` does (`tuningUnit` in compare/tune.ts); older reports without a unit read as
 * channels.
 */

/** A layer's units, as `tuningUnit` names them (undefined: channels, the word of older reports). */
export type UnitName = 'channels' | 'features' | 'heads' | undefined;

/** The words for a table of layers. */
export interface UnitWords {
  /** Singular ("channel", "feature", "head" or "unit" when mixed). */
  one: string;
  /** Plural. */
  many: string;
  /** When mixed: what a unit is at which layers (empty otherwise). */
  note: string;
}

const SINGULAR = { channels: 'channel', features: 'feature', heads: 'head' } as const;

/**
 * The unit words of a table whose rows have these units.
 * @param units each row's unit (undefined: channels).
 * @param labels each row's label (same order), to say which layers a minority unit is at ("channels at
 *   logits"); without them the note only says what each unit is.
 */
export function unitWords(units: readonly UnitName[], labels?: readonly string[]): UnitWords {
  const kinds = [...new Set(units.map((u) => u ?? 'channels'))];
  if (kinds.length <= 1) {
    const kind = kinds[0] ?? 'channels';
    return { one: SINGULAR[kind], many: kind, note: '' };
  }
  const meaning = { channels: 'channels (of feature maps and vectors)', features: 'features (of token tensors, over all tokens)', heads: 'heads' } as const;
  // the commonest unit is "elsewhere"; the others name their layers when there are few
  const count = (k: (typeof kinds)[number]) => units.filter((u) => (u ?? 'channels') === k).length;
  const order = [...kinds].sort((a, b) => count(b) - count(a));
  const where = (k: (typeof kinds)[number], i: number): string => {
    if (i === 0) return order.length > 1 && labels ? 'elsewhere' : '';
    const at = labels ? labels.filter((_, r) => (units[r] ?? 'channels') === k) : [];
    return at.length > 0 && at.length <= 3 ? `at ${at.join(', ')}` : `at ${count(k)} layers`;
  };
  const clauses = order.map((k, i) => `${meaning[k]} ${where(k, i)}`.trim());
  return { one: 'unit', many: 'units', note: `units: ${[...clauses.slice(1), clauses[0]!].join('; ')}` };
}

/**
 * How a layer's unit count reads in a count column: the bare number for channels in a table of channels,
 * else with its word ("768 features", "12 heads").
 * @param count units at the layer.
 * @param unit the layer's unit.
 * @param words the table's words (from `unitWords`).
 */
export function unitCount(count: number | string, unit: UnitName, words: UnitWords): string {
  const kind = unit ?? 'channels';
  return words.note === '' ? String(count) : `${count} ${kind}`;
}
