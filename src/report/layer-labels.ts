/**
 * Short labels for tensor names, for tables and charts where a full ONNX tensor name
 * (`/features/features.3/conv/conv.0/conv.0.2/Clip_output_0`) would fill the line or be cut.
 *
 * A label is the shortest unique *suffix* of a cleaned name, counted in path segments. Cleaning drops
 * what graph exporters repeat on every tensor and so never tells two layers apart:
 * - the `_output_N` tail of the last segment (`Relu_output_0` → `Relu`);
 * - a segment that the next one repeats: `relu/Relu` → `Relu` (same text, any case) and the dotted
 *   module paths of PyTorch exports, `features/features.3` → `features.3`, `conv/conv.0/conv.0.2` →
 *   `conv.0.2` (the next segment starts with this one and a dot).
 * A name whose cleaned form is empty or collides with another's keeps its full name; so does any name
 * whose label would collide. The full names stay available (`title` on hover in the report, a legend
 * line in the terminal).
 */

/** The cleaned path segments of one tensor name (see the module comment); may be empty. */
export function labelSegments(name: string): string[] {
  const raw = name.split('/').filter((s) => s.length > 0);
  if (raw.length > 0) raw[raw.length - 1] = raw[raw.length - 1]!.replace(/_output_\d+$/, '');
  const kept: string[] = [];
  for (let i = 0; i < raw.length; i++) {
    const next = raw[i + 1];
    const segment = raw[i]!;
    if (segment.length === 0) continue;
    if (next !== undefined && (next.toLowerCase() === segment.toLowerCase() || next.startsWith(`${segment}.`))) continue;
    kept.push(segment);
  }
  return kept;
}

/**
 * Short, unique labels for a set of tensor names (see the module comment).
 * @param names tensor names; repeats get the same label.
 * @returns a map from every distinct name to its label; distinct names always get distinct labels.
 */
export function shortLayerLabels(names: readonly string[]): Map<string, string> {
  const distinct = [...new Set(names)];
  const segments = new Map(distinct.map((n) => [n, labelSegments(n)] as const));
  // how many names end in each k-segment suffix (one pass per k: linear in the names, for models with thousands of tensors)
  const longest = Math.max(0, ...[...segments.values()].map((s) => s.length));
  const counts: Array<Map<string, number>> = [];
  for (let k = 1; k <= longest; k++) {
    const count = new Map<string, number>();
    for (const own of segments.values()) {
      const suffix = own.slice(-k).join('/');
      count.set(suffix, (count.get(suffix) ?? 0) + 1);
    }
    counts.push(count);
  }
  const labels = new Map<string, string>();
  for (const name of distinct) {
    const own = segments.get(name)!;
    let label = name;
    for (let k = 1; k <= own.length; k++) {
      const suffix = own.slice(-k).join('/');
      if (counts[k - 1]!.get(suffix) === 1) {
        label = suffix;
        break;
      }
    }
    labels.set(name, label);
  }
  // two labels can still coincide (one cleaned path is the end of another, or cleaning merged two names):
  // those names keep their full names, repeated until no label is shared (full names are distinct)
  for (let changed = true; changed; ) {
    changed = false;
    const counts = new Map<string, number>();
    for (const label of labels.values()) counts.set(label, (counts.get(label) ?? 0) + 1);
    for (const [name, label] of labels) {
      if (counts.get(label)! > 1 && label !== name) {
        labels.set(name, name);
        changed = true;
      }
    }
  }
  return labels;
}

/**
 * Shortens text to at most `width` characters (code points) with an ellipsis in the middle, keeping
 * the start and, longer, the end (where tensor names differ).
 * @param text any text.
 * @param width the most characters allowed (at least 3).
 * @returns the text itself when it fits.
 */
export function ellipsize(text: string, width: number): string {
  const chars = [...text];
  if (chars.length <= width) return text;
  const room = Math.max(2, width) - 1;
  const head = Math.floor(room / 3);
  return `${chars.slice(0, head).join('')}…${chars.slice(chars.length - (room - head)).join('')}`;
}
