/**
 * JSON input parsing that refuses duplicate object keys. `JSON.parse` silently keeps the last of two
 * equal keys (ECMA-262 JSON.parse; RFC 8259 §4 only says names SHOULD be unique and that behaviour with
 * duplicates is unpredictable), so `{"strength": 0.1, "strength": 10}` would run with 10 and nobody
 * would know. Every JSON file a user hands Sonde (modulation specs, model sidecars, manifests, report
 * and partial inputs) goes through `parseJson`, as YAML specs already refuse duplicate keys.
 */
import type { z } from 'zod';

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

/**
 * Checks `value` against a zod `schema` (the schemas of manifests, sidecars and partial files live
 * beside their readers).
 * @returns null when it conforms, else one line naming the first wrong field by its path and what was
 *   found there, e.g. `readout.threshold must be a number (got "x")`.
 */
export function schemaProblem(schema: z.ZodType, value: unknown): string | null {
  const result = schema.safeParse(value);
  if (result.success) return null;
  const issue = result.error.issues[0]!;
  const path = fieldPath(issue.path);
  const found = valueAt(value, issue.path);
  const shown = found === undefined ? 'missing' : `got ${preview(found)}`;
  return `${path === '' ? 'the file' : path} ${describeIssue(issue)} (${shown})`;
}

/** `layers[2].shape[0]` from zod's path. */
export function fieldPath(path: ReadonlyArray<PropertyKey>): string {
  let text = '';
  for (const key of path) {
    if (typeof key === 'number') text += `[${key}]`;
    else text += text === '' ? String(key) : `.${String(key)}`;
  }
  return text;
}

function describeIssue(issue: z.core.$ZodIssue): string {
  switch (issue.code) {
    case 'invalid_type':
      return `must be ${article(issue.expected)}`;
    case 'invalid_value':
      return `must be ${issue.values.map((v) => JSON.stringify(v)).join(' or ')}`;
    case 'too_small':
      return issue.origin === 'array' || issue.origin === 'string' ? `must have at least ${String(issue.minimum)} ${unit(issue.origin, Number(issue.minimum))}` : `must be ${issue.inclusive ? 'at least' : 'above'} ${String(issue.minimum)}`;
    case 'too_big':
      return issue.origin === 'array' || issue.origin === 'string' ? `must have at most ${String(issue.maximum)} ${unit(issue.origin, Number(issue.maximum))}` : `must be at most ${String(issue.maximum)}`;
    default:
      return issue.message.startsWith('must') ? issue.message : `is invalid: ${issue.message}`;
  }
}

function unit(origin: string, n: number): string {
  return origin === 'array' ? (n === 1 ? 'entry' : 'entries') : n === 1 ? 'character' : 'characters';
}

function article(expected: string): string {
  if (expected === 'int') return 'an integer';
  if (expected === 'array') return 'a list';
  if (expected === 'object') return 'an object';
  return /^[aeiou]/.test(expected) ? `an ${expected}` : `a ${expected}`;
}

function valueAt(value: unknown, path: ReadonlyArray<PropertyKey>): unknown {
  let at: unknown = value;
  for (const key of path) {
    if (typeof at !== 'object' || at === null) return undefined;
    at = (at as Record<PropertyKey, unknown>)[key];
  }
  return at;
}

function preview(value: unknown): string {
  const text = JSON.stringify(value) ?? String(value);
  return text.length > 40 ? `${text.slice(0, 37)}...` : text;
}
