/**
 * Readout maps (`--readout-map`): which readout units make up each stimulus category, applied at
 * analysis time to recorded (or replayed) readouts — no re-recording, and the model's sidecar stays the
 * default. A category's score is the log-sum-exp of its units' values (src/stats/log-sum-exp.ts): for
 * logits, the log of the category's summed softmax probability up to a normaliser shared by all
 * categories. Units no category lists are ignored.
 *
 * Forms (the same for every command):
 * - a JSON file: `{"dog": ["151..268"], "cat": [281, 282, "tabby"]}` — an object from category to a
 *   list (or one entry) of units;
 * - inline: `dog=151..268;cat=281,282,tabby` — categories separated by `;`, units by `,` (names with
 *   `;`, `,` or `=` need the file form).
 * A unit is an index (a JSON integer; inline, digits), an inclusive index range `A..B`, or a unit name
 * from the model's sidecar (`outputs.kinds`); in a file, a string of digits is a name when a unit has
 * that name, else an index. The inline form and a file with the same entries are the same map (one
 * digest).
 *
 * The map's identity, recorded in the tables made under it, is its name (the file name, or `inline`)
 * and the SHA-256 of its canonical form (categories in order, each with its unit entries as written).
 */
import { createHash } from 'node:crypto';
import { existsSync, statSync } from 'node:fs';
import { basename } from 'node:path';
import { closestHint, nameList, UsageError } from '../errors.js';
import { parseJson } from '../json.js';
import { INPUT_LIMITS, readInputText } from '../disk/input-file.js';

/** A unit entry as written: an index, or text (a unit name, digits, or a range `A..B`). */
export type UnitEntry = number | string;

/** A readout map as read, before it meets a readout. */
export interface ReadoutMap {
  /** The file name, or `inline`. */
  name: string;
  /** How it was given, for messages: `--readout-map FILE` or the inline text. */
  source: string;
  /** SHA-256 (hex) of the canonical form. */
  sha256: string;
  /** Categories in order, each with its unit entries as written. */
  entries: ReadonlyArray<{ category: string; units: readonly UnitEntry[] }>;
}

/** A map resolved against one readout: unit indices per category. */
export interface ResolvedReadoutMap {
  name: string;
  sha256: string;
  /** The readout tensor the units belong to. */
  readout: string;
  /** Units of that readout. */
  width: number;
  categories: string[];
  /** Unit indices of each category, in the order written, [G][…]. */
  groups: number[][];
}

/** What tables record of the map they were made under (schema metadata `sonde.readout_map`). */
export interface ReadoutMapTag {
  name: string;
  sha256: string;
}

/** `name sha256:XXXXXXXXXXXX` (12 hex digits), for messages and summaries. */
export function describeMapTag(tag: ReadoutMapTag | null): string {
  return tag ? `${tag.name} sha256:${tag.sha256.slice(0, 12)}` : 'no readout map (the sidecar\'s units)';
}

/**
 * Reads a readout map from a file path or an inline text (inline when no file of that name exists and
 * the text contains `=`).
 * @throws UsageError when the file is not a regular file, too large, not JSON, not an object of lists,
 *   or an inline text is malformed; when a category is named twice or lists no units; when an entry is
 *   neither an integer, digits, a range nor a name.
 */
export function readReadoutMap(text: string): ReadoutMap {
  const isFile = existsSync(text) && statSync(text).isFile();
  if (!isFile && !text.includes('=')) {
    throw new UsageError('E_READOUT_MAP', `--readout-map ${text}: no such file, and not an inline map`, { hint: 'give a JSON file {"dog": ["151..268"], …} or inline text dog=151..268;cat=281,282' });
  }
  const source = isFile ? `--readout-map ${text}` : `--readout-map "${text}"`;
  const entries: Array<{ category: string; units: UnitEntry[] }> = [];
  if (isFile) {
    const raw = readInputText(text, `readout map ${text}`, INPUT_LIMITS.json);
    let value: unknown;
    try {
      value = parseJson(raw);
    } catch (error) {
      throw new UsageError('E_READOUT_MAP', `${source} is not valid JSON (${(error as Error).message})`, { hint: 'write an object from category to a list of units: {"dog": ["151..268"], "cat": [281, "tabby"]}' });
    }
    if (typeof value !== 'object' || value === null || Array.isArray(value)) {
      throw new UsageError('E_READOUT_MAP', `${source} must be a JSON object from category to units (got ${Array.isArray(value) ? 'a list' : typeof value})`, { hint: 'e.g. {"dog": ["151..268"], "cat": [281, "tabby"]}' });
    }
    for (const [category, list] of Object.entries(value as Record<string, unknown>)) {
      const items = Array.isArray(list) ? list : [list];
      for (const item of items) {
        if (!(typeof item === 'string' || (typeof item === 'number' && Number.isInteger(item)))) {
          throw new UsageError('E_READOUT_MAP', `${source}: category "${category}" lists ${JSON.stringify(item)}; a unit is an integer index, "A..B" or a unit name`);
        }
      }
      entries.push({ category, units: items as UnitEntry[] });
    }
  } else {
    for (const part of text.split(';')) {
      if (part.trim() === '') continue;
      const eq = part.indexOf('=');
      if (eq < 0) throw new UsageError('E_READOUT_MAP', `${source}: "${part.trim()}" has no "="; write CATEGORY=UNIT,UNIT;…`, { hint: 'e.g. dog=151..268;cat=281,282' });
      const category = part.slice(0, eq).trim();
      // digits are indices here (as JSON integers are in a file), so the two forms of one map agree
      const units = part.slice(eq + 1).split(',').map((u) => u.trim()).filter((u) => u.length > 0).map((u): UnitEntry => (/^\d+$/.test(u) && Number.isSafeInteger(Number(u)) ? Number(u) : u));
      if (entries.some((e) => e.category === category)) throw new UsageError('E_READOUT_MAP', `${source}: category "${category}" is named twice`, { hint: 'list all of its units once: CATEGORY=A,B,C' });
      entries.push({ category, units });
    }
  }
  if (entries.length === 0) throw new UsageError('E_READOUT_MAP', `${source} names no category`, { hint: 'e.g. dog=151..268;cat=281,282' });
  for (const { category, units } of entries) {
    if (category === '') throw new UsageError('E_READOUT_MAP', `${source}: a category has an empty name`);
    if (units.length === 0) throw new UsageError('E_READOUT_MAP', `${source}: category "${category}" lists no units`, { hint: 'give it at least one readout unit (an index, A..B, or a unit name), or leave it out' });
  }
  const canonical = JSON.stringify(entries.map((e) => [e.category, e.units]));
  return { name: isFile ? basename(text) : 'inline', source, sha256: createHash('sha256').update(canonical).digest('hex'), entries };
}

/**
 * Resolves a map against a readout: every entry becomes unit indices.
 * @param map the map.
 * @param readout the readout tensor name, its width, and its unit names (sidecar kinds) or null.
 * @returns unit indices per category.
 * @throws UsageError, one line each: an unknown unit name (closest names), an index or range outside
 *   [0, width), a reversed range, a unit listed twice (within or across categories).
 */
export function resolveReadoutMap(map: ReadoutMap, readout: { tensor: string; width: number; names: readonly string[] | null }): ResolvedReadoutMap {
  const { tensor, width, names } = readout;
  const byName = new Map<string, number>();
  names?.forEach((n, i) => {
    if (!byName.has(n)) byName.set(n, i);
  });
  const owner = new Int32Array(width).fill(-1);
  const groups: number[][] = [];
  const describe = (u: number): string => (names && names[u] !== undefined && names[u] !== String(u) ? `unit ${u} ("${names[u]}")` : `unit ${u}`);
  const range = `${width} units, indices 0–${width - 1}`;
  map.entries.forEach(({ category, units }, g) => {
    const group: number[] = [];
    const add = (u: number, written: UnitEntry): void => {
      if (!Number.isSafeInteger(u) || u < 0 || u >= width) {
        throw new UsageError('E_READOUT_MAP', `${map.source}: category "${category}" lists ${JSON.stringify(written)}, outside readout "${tensor}" (${range})`, { hint: 'indices count from 0' });
      }
      if (owner[u] !== -1) {
        const first = map.entries[owner[u]!]!.category;
        throw new UsageError('E_READOUT_MAP', `${map.source}: ${describe(u)} is listed ${owner[u] === g ? `twice for "${category}"` : `for both "${first}" and "${category}"`}`, { hint: 'a unit belongs to one category at most; remove the repeat' });
      }
      owner[u] = g;
      group.push(u);
    };
    for (const entry of units) {
      if (typeof entry === 'number') {
        add(entry, entry);
        continue;
      }
      const named = byName.get(entry);
      if (named !== undefined) {
        add(named, entry);
        continue;
      }
      const span = /^\s*(\d+)\s*\.\.\s*(\d+)\s*$/.exec(entry);
      if (span) {
        const from = Number(span[1]);
        const to = Number(span[2]);
        if (to < from) throw new UsageError('E_READOUT_MAP', `${map.source}: category "${category}" lists the range "${entry}", which runs backwards`, { hint: `write ${to}..${from}` });
        if (to >= width) add(to, entry);
        for (let u = from; u <= to; u++) add(u, entry);
        continue;
      }
      if (/^\d+$/.test(entry.trim())) {
        add(Number(entry), entry);
        continue;
      }
      const near = names ? closestHint(entry, names) : '';
      throw new UsageError('E_READOUT_MAP', `${map.source}: category "${category}" lists "${entry}", which is not a unit of readout "${tensor}" (${names ? `${range}: ${nameList(names, 4)}` : `${range}, no unit names: no sidecar names every unit`}${near ? `; ${near}` : ''})`, {
        hint: 'use a unit name from the sidecar\'s outputs.kinds, an index, or a range A..B',
      });
    }
    groups.push(group);
  });
  return { name: map.name, sha256: map.sha256, readout: tensor, width, categories: map.entries.map((e) => e.category), groups };
}

/** The tag tables record: name and digest. */
export function mapTag(map: Pick<ReadoutMap, 'name' | 'sha256'> | null | undefined): ReadoutMapTag | null {
  return map ? { name: map.name, sha256: map.sha256 } : null;
}
