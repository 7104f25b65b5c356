/**
 * JSON input parsing that refuses duplicate object keys. `JSON.parse` silently keeps the last of two
 * equal keys (ECMA-262 JSON.parse; RFC 8259 §4 only says names SHOULD be unique and that behaviour with
 * duplicates is unpredictable), so `{"strength": 0.1, "strength": 10}` would run with 10 and nobody
 * would know. Every JSON file a user hands Sonde (modulation specs, model sidecars, manifests, report
 * and partial inputs) goes through `parseJson`, as YAML specs already refuse duplicate keys.
 */

/**
 * Parses JSON text like `JSON.parse`, and then refuses an object that names a key twice (keys compared
 * after unescaping, so `"a"` and `"\u0061"` are the same key).
 * @throws SyntaxError for invalid JSON (JSON.parse's own), or `duplicate key "K" at line L, column C`.
 */
export function parseJson(text: string): unknown {
  const value: unknown = JSON.parse(text);
  assertUniqueKeys(text);
  return value;
}

/** One pass over text already known to be valid JSON: a key set per open object, null per array. */
function assertUniqueKeys(text: string): void {
  const open: (Set<string> | null)[] = [];
  let expectKey = false;
  for (let i = 0; i < text.length; i++) {
    const ch = text.charCodeAt(i);
    if (ch === 0x22) {
      // a string: find its closing quote, skipping escaped characters
      let end = i + 1;
      while (text.charCodeAt(end) !== 0x22) end += text.charCodeAt(end) === 0x5c ? 2 : 1;
      const keys = open[open.length - 1];
      if (expectKey && keys) {
        const key = JSON.parse(text.slice(i, end + 1)) as string;
        if (keys.has(key)) throw new SyntaxError(`duplicate key ${JSON.stringify(key)} at ${position(text, i)}`);
        keys.add(key);
        expectKey = false;
      }
      i = end;
    } else if (ch === 0x7b) {
      open.push(new Set());
      expectKey = true;
    } else if (ch === 0x5b) {
      open.push(null);
      expectKey = false;
    } else if (ch === 0x7d || ch === 0x5d) {
      open.pop();
      expectKey = false;
    } else if (ch === 0x2c) expectKey = open[open.length - 1] !== null && open.length > 0;
  }
}

/** "line L, column C" (1-based) of character `index`. */
function position(text: string, index: number): string {
  let line = 1;
  let start = 0;
  for (let i = 0; i < index; i++) {
    if (text.charCodeAt(i) === 0x0a) {
      line++;
      start = i + 1;
    }
  }
  return `line ${line}, column ${index - start + 1}`;
}
