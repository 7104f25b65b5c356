/**
 * Reading and validating modulation spec files (JSON or YAML).
 *
 * A spec is either one modulation object or `{ modulations: [ ... ] }`. Each modulation names a `site`
 * (ONNX tensor) and a `kind`; the other keys depend on the kind:
 *
 * | kind          | keys (besides `site`, `kind`, `window`, `allowNegative`)                     |
 * |---------------|-------------------------------------------------------------------------------|
 * | `gain`        | `values` (per-channel gains: inline list or `.npy`/`.csv` path)                |
 * | `uniform`     | `gain` (the gain for every channel; older specs: `strength`, same meaning)     |
 * | `offset`      | `values` (per-channel additive offsets)                                        |
 * | `lesion`      | `channels: [..]`, or `top: k` + `target` (+ `rankBy: tuning|sensitivity`)      |
 * | `noise`       | `sd`, `mode: multiplicative|additive` (default multiplicative), `seed` (def. 0)|
 * | `tuning`      | `target`, `strength` (β in g_k = max(0, 1 + β·v_k))                          |
 * | `sensitivity` | `target`, `strength`                                                           |
 *
 * `window` is `{ shape: box, x0, x1, y0, y1 }` or `{ shape: gaussian, cx, cy, sigma }`, coordinates in
 * [0, 1] relative to the map, plus optional `outside` (gain outside the window, default 1); see
 * `types.ts` for the weights. On a token tensor the window falls on the patch grid (prefix tokens such
 * as the class token lie outside it).
 *
 * Token tensors and heads (keys every kind accepts):
 * - `tokens`: a token selection, `[class, 5, [2, 3], patches]` (class token, token index, patch
 *   `[row, column]` of the grid, every patch) or `{ at: [...], outside: G }`; the modulation applies to
 *   the chosen tokens only, the others get `outside` (default 1). Not together with `window`.
 * - `per: head`: the vector (`values`), the lesion list and table rows index the heads of a multi-head
 *   tensor instead of its features; `headCount: H` says how many heads there are when the model does
 *   not. A lesion may list heads directly: `heads: [3, 7]`. A key a kind does not use is an error, as is any unknown key: a spec
 * either means exactly what it says or is rejected. Every message starts with the source and the field
 * path, e.g. `spec.yaml: modulations[1].strength must be a finite number, got "abc"`.
 */
import { INPUT_LIMITS, readInputText } from '../disk/input-file.js';
import { dirname, isAbsolute, resolve as resolvePath } from 'node:path';
import { parseDocument } from 'yaml';
import { closestHint, RuntimeFailure, SondeError, UsageError } from '../errors.js';
import { readValuesFile } from './values-file.js';
import {
  MODULATION_KINDS,
  type GaussianWindow,
  type BoxWindow,
  type Modulation,
  type ModulationKind,
  type ModulationSpec,
  type SpatialWindow,
  type TokenChoice,
  type TokenSelection,
} from './types.js';

/** One token choice: an index, `class`, `patches`, or a patch `[row, column]`. */
const TOKEN_CHOICE = z.union([z.number().int().nonnegative(), z.literal('class'), z.literal('patches'), z.tuple([z.number().int().nonnegative(), z.number().int().nonnegative()])]);
const TOKEN_LIST = z.array(TOKEN_CHOICE).min(1);
const TOKEN_OBJECT = z.strictObject({ at: TOKEN_LIST, outside: z.number().finite().optional() });
import { parseJson, schemaProblem } from '../json.js';
import { z } from 'zod';

/** Options of `parseModulationSpec`. */
export interface ParseSpecOptions {
  /**
   * Path of the spec file (or a label such as `<inline>`): it prefixes every message, its extension
   * picks the parser (`.json` → JSON, anything else → YAML, which also reads JSON), and relative
   * `values` paths are resolved against its folder (for a bare label: the working directory).
   */
  source: string;
}

const COMMON_KEYS = ['site', 'kind', 'window', 'tokens', 'per', 'headCount', 'allowNegative'] as const;

/** Keys each kind accepts, besides the common ones. */
const KIND_KEYS: Record<ModulationKind, readonly string[]> = {
  gain: ['values'],
  uniform: ['gain', 'strength'],
  offset: ['values'],
  lesion: ['channels', 'heads', 'top', 'target', 'rankBy'],
  noise: ['mode', 'sd', 'seed'],
  tuning: ['target', 'strength'],
  sensitivity: ['target', 'strength'],
};

const ALL_KEYS = [...new Set([...COMMON_KEYS, ...Object.values(KIND_KEYS).flat()])];
const BOX_KEYS = ['shape', 'x0', 'x1', 'y0', 'y1', 'outside'] as const;
const GAUSSIAN_KEYS = ['shape', 'cx', 'cy', 'sigma', 'outside'] as const;
const NEGATIVE_HINT = 'set allowNegative: true to allow negative gains';

/**
 * Parses and validates a spec file's text.
 * @param text JSON or YAML text.
 * @param options `source`: the file path (messages, parser choice, base folder of relative `values`).
 * @returns The validated spec with defaults filled in (`allowNegative: false`, window `outside: 1`,
 *   noise `mode: multiplicative`, `seed: 0`, lesion `rankBy: tuning`) and file `values` read into lists.
 * @throws UsageError for malformed text, an empty spec or list, unknown or misplaced keys, wrong types,
 *   NaN/Inf (inline or in files), window coordinates outside [0, 1], an empty box, sigma ≤ 0, negative
 *   gains without `allowNegative`, missing vectors and duplicate sites — each naming the field path.
 *   RuntimeFailure when a `values` file exists but cannot be read.
 */
export function parseModulationSpec(text: string, options: ParseSpecOptions): ModulationSpec {
  return validateModulationSpec(parseText(text, options.source), options);
}

/**
 * Reads and validates a spec file.
 * @param path The spec file; relative `values` paths inside it are resolved against its folder.
 * @throws UsageError when the file does not exist or is invalid (see `parseModulationSpec`);
 *   RuntimeFailure when it exists but cannot be read.
 */
export function loadModulationSpec(path: string): ModulationSpec {
  let text: string;
  try {
    text = readInputText(path, `modulation spec ${JSON.stringify(path)}`, INPUT_LIMITS.json);
  } catch (error) {
    if (error instanceof SondeError) throw error;
    const code = error instanceof Error && 'code' in error ? (error as NodeJS.ErrnoException).code : undefined;
    if (code === 'ENOENT' || code === 'ENOTDIR') {
      throw new UsageError('E_SPEC_READ', `modulation spec ${JSON.stringify(path)} not found`, { hint: 'pass the path of a .yaml or .json spec file' });
    }
    if (code === 'EISDIR') throw new UsageError('E_SPEC_READ', `modulation spec ${JSON.stringify(path)} is a folder, not a file`);
    throw new RuntimeFailure('E_SPEC_READ', `cannot read modulation spec ${JSON.stringify(path)} (${code ?? String(error)})`, { cause: error });
  }
  return parseModulationSpec(text, { source: path });
}

/**
 * Validates an already-parsed spec value (what `JSON.parse` or a YAML parser returned, or an object
 * built in code). Same rules and errors as `parseModulationSpec`.
 */
export function validateModulationSpec(value: unknown, options: ParseSpecOptions): ModulationSpec {
  const reader: SpecReader = new SpecReader(options.source);
  if (value === null || value === undefined) reader.fail('', 'is empty; write one modulation object or { modulations: [...] }');
  if (Array.isArray(value)) {
    reader.fail('', 'is a bare list; wrap it as { modulations: [...] }');
  }
  if (!isRecord(value)) reader.fail('', `must be a modulation object or { modulations: [...] }, got ${describeValue(value)}`);
  let modulations: Modulation[];
  let form: 'single' | 'list';
  if (Object.hasOwn(value, 'modulations')) {
    form = 'list';
    for (const key of Object.keys(value)) {
      if (key !== 'modulations') {
        reader.fail(key, `is not allowed next to modulations (a list spec holds only "modulations"; ${closestHint(key, ['modulations']) || 'remove it'})`);
      }
    }
    const list = value['modulations'];
    if (!Array.isArray(list)) reader.fail('modulations', `must be a list of modulation objects, got ${describeValue(list)}`);
    if (list.length === 0) reader.fail('modulations', 'is empty; give at least one modulation');
    modulations = list.map((item: unknown, i) => reader.modulation(item, `modulations[${i}]`));
  } else {
    form = 'single';
    modulations = [reader.modulation(value, '')];
  }
  const seen = new Map<string, number>();
  modulations.forEach((m, i) => {
    const earlier = seen.get(m.site);
    if (earlier !== undefined) {
      reader.fail(`modulations[${i}].site`, `${JSON.stringify(m.site)} is already modulated by modulations[${earlier}]; give each site one modulation`);
    }
    seen.set(m.site, i);
  });
  return { source: options.source, form, modulations, ...(reader.notices.length > 0 ? { notices: reader.notices } : {}) };
}

/**
 * The JSON-able file form of a validated spec: the inverse of `validateModulationSpec` — for every spec
 * `s`, `validateModulationSpec(specToObject(s), { source: s.source })` equals `s` except that values read
 * from files are now inline (`valuesFile`, provenance only, is dropped).
 */
export function specToObject(spec: ModulationSpec): Record<string, unknown> {
  const plain = spec.modulations.map((m) => {
    const copy: Record<string, unknown> = { ...m };
    delete copy['valuesFile'];
    if (m.window !== undefined) copy['window'] = { ...m.window };
    if ('values' in m) copy['values'] = [...m.values];
    if (m.tokens !== undefined) copy['tokens'] = { at: m.tokens.at.map((c) => (Array.isArray(c) ? [...c] : c)), outside: m.tokens.outside };
    if ('channels' in m) {
      if (m.per === 'head') {
        delete copy['channels'];
        copy['heads'] = [...m.channels];
      } else copy['channels'] = [...m.channels];
    }
    if (m.kind === 'uniform') {
      // written with the unambiguous key (the gain itself); `strength` still reads the same
      delete copy['strength'];
      copy['gain'] = m.strength;
    }
    return copy;
  });
  return spec.form === 'list' ? { modulations: plain } : plain[0]!;
}

/** Parses JSON (for `.json` sources) or YAML text into a plain value. */
function parseText(text: string, source: string): unknown {
  if (source.toLowerCase().endsWith('.json')) {
    try {
      return parseJson(text.replace(/^\uFEFF/, ''));
    } catch (error) {
      throw new UsageError('E_SPEC', `${source}: not valid JSON (${firstLine(error)})`);
    }
  }
  let document;
  try {
    document = parseDocument(text, { logLevel: 'error', prettyErrors: false, uniqueKeys: true });
  } catch (error) {
    throw new UsageError('E_SPEC', `${source}: not valid YAML (${firstLine(error)})`);
  }
  const problem = document.errors[0] ?? document.warnings[0];
  if (problem !== undefined) {
    const at = problem.linePos?.[0];
    const where = at === undefined ? '' : `line ${at.line}, column ${at.col}: `;
    throw new UsageError('E_SPEC', `${source}: not valid YAML (${where}${firstLine(problem)})`);
  }
  try {
    return document.toJS({ maxAliasCount: 100 }) as unknown;
  } catch (error) {
    throw new UsageError('E_SPEC', `${source}: not valid YAML (${firstLine(error)})`);
  }
}

function firstLine(error: unknown): string {
  const text = error instanceof Error ? error.message : String(error);
  return (text.split('\n')[0] ?? '').trim();
}

function isRecord(value: unknown): value is Record<string, unknown> {
  return typeof value === 'object' && value !== null && !Array.isArray(value);
}

/**
 * A short, one-line rendering of a user value for messages: strings quoted, numbers as JS prints them
 * (`NaN`, `Infinity`), lists and objects abbreviated.
 */
export function describeValue(value: unknown, depth = 0): string {
  if (typeof value === 'string') return JSON.stringify(value.length > 40 ? `${value.slice(0, 37)}...` : value);
  if (typeof value === 'number' || typeof value === 'boolean' || typeof value === 'bigint') return String(value);
  if (value === null) return 'null';
  if (value === undefined) return 'nothing';
  if (depth > 1) return Array.isArray(value) ? '[…]' : '{…}';
  if (Array.isArray(value)) {
    const items = value.slice(0, 4).map((v: unknown) => describeValue(v, depth + 1));
    return `[${items.join(', ')}${value.length > 4 ? `, … (${value.length} items)` : ''}]`;
  }
  if (typeof value === 'object') {
    const keys = Object.keys(value);
    return `{${keys.slice(0, 4).join(', ')}${keys.length > 4 ? ', …' : ''}}`;
  }
  return typeof value;
}

function join(path: string, key: string): string {
  return path === '' ? key : `${path}.${key}`;
}

/** Validation with messages prefixed by the source and field path. */
class SpecReader {
  /** Things a valid spec may still be misread as (see `ModulationSpec.notices`). */
  readonly notices: string[] = [];
  private readonly source: string;
  private readonly folder: string;

  constructor(source: string) {
    this.source = source;
    this.folder = dirname(source);
  }

  fail(path: string, message: string, hint?: string): never {
    const subject = path === '' ? 'the spec' : path;
    throw new UsageError('E_SPEC', `${this.source}: ${subject} ${message}`, hint === undefined ? {} : { hint });
  }

  modulation(value: unknown, path: string): Modulation {
    const subject = path === '' ? 'the modulation' : path;
    if (!isRecord(value)) this.fail(path, `must be a modulation object with site and kind, got ${describeValue(value)}`);
    if (!Object.hasOwn(value, 'kind')) this.fail(join(path, 'kind'), `is required (one of ${MODULATION_KINDS.join(', ')})`);
    const kindValue = value['kind'];
    if (typeof kindValue !== 'string' || !(MODULATION_KINDS as readonly string[]).includes(kindValue)) {
      const near = typeof kindValue === 'string' ? closestHint(kindValue, MODULATION_KINDS, 1) : '';
      this.fail(join(path, 'kind'), `must be one of ${MODULATION_KINDS.join(', ')}, got ${describeValue(kindValue)}${near ? ` (${near})` : ''}`);
    }
    const kind = kindValue as ModulationKind;
    const allowed = [...COMMON_KEYS, ...KIND_KEYS[kind]];
    for (const key of Object.keys(value)) {
      if (allowed.includes(key)) continue;
      if (ALL_KEYS.includes(key)) {
        this.fail(join(path, key), `is not used by kind ${JSON.stringify(kind)} (its keys: ${allowed.join(', ')})`);
      }
      if (key === 'outside') this.fail(join(path, key), 'belongs inside window (window.outside)');
      const candidates = path === '' ? [...allowed, 'modulations'] : allowed;
      const near = closestHint(key, candidates, 1);
      this.fail(join(path, key), `is not a key of a ${JSON.stringify(kind)} modulation${near ? ` (${near})` : ''}; its keys: ${allowed.join(', ')}`);
    }
    if (!Object.hasOwn(value, 'site')) this.fail(join(path, 'site'), `is required: ${subject} must name the ONNX tensor to modulate`);
    const site = value['site'];
    if (typeof site !== 'string' || site.length === 0) this.fail(join(path, 'site'), `must be a non-empty tensor name, got ${describeValue(site)}`);
    const allowNegative = this.optionalBoolean(value, join(path, 'allowNegative'), false);
    const window = Object.hasOwn(value, 'window') ? this.window(value['window'], join(path, 'window'), allowNegative) : undefined;
    const tokens = Object.hasOwn(value, 'tokens') ? this.tokens(value['tokens'], join(path, 'tokens'), allowNegative) : undefined;
    if (window !== undefined && tokens !== undefined) this.fail(join(path, 'tokens'), 'cannot be combined with window; select positions either by a window on the grid or by a token list');
    const perHead = this.unit(value, path, kind);
    const common: { site: string; window?: SpatialWindow; tokens?: TokenSelection; per?: 'head'; headCount?: number; allowNegative: boolean } = { site, allowNegative };
    if (window !== undefined) common.window = window;
    if (tokens !== undefined) common.tokens = tokens;
    if (perHead.per !== undefined) common.per = perHead.per;
    if (perHead.headCount !== undefined) common.headCount = perHead.headCount;
    switch (kind) {
      case 'gain': {
        const { values, valuesFile } = this.vector(value, path, 'gains');
        if (!allowNegative) {
          values.forEach((v, i) => {
            if (v < 0) this.fail(`${join(path, 'values')}[${i}]${valuesFile === undefined ? '' : ` (from ${valuesFile})`}`, `is ${v}; gains must be ≥ 0`, NEGATIVE_HINT);
          });
        }
        return valuesFile === undefined ? { kind, ...common, values } : { kind, ...common, values, valuesFile };
      }
      case 'offset': {
        const { values, valuesFile } = this.vector(value, path, 'offsets');
        return valuesFile === undefined ? { kind, ...common, values } : { kind, ...common, values, valuesFile };
      }
      case 'uniform': {
        // `gain` is the gain itself; `strength` (older specs) meant the same, unlike the sweep's uniform
        // scheme, whose strength β is a gain of 1 + β: accepted, with a notice saying so
        if (Object.hasOwn(value, 'gain') && Object.hasOwn(value, 'strength')) this.fail(join(path, 'strength'), 'cannot be combined with gain; give the gain for every channel as gain: G');
        const key = Object.hasOwn(value, 'strength') ? 'strength' : 'gain';
        const strength = this.requiredNumber(value, join(path, key), 'the gain for every channel (gain: G)');
        if (strength < 0 && !allowNegative) this.fail(join(path, key), `is ${strength}; gains must be ≥ 0`, NEGATIVE_HINT);
        if (key === 'strength') this.notices.push(`${this.source}: ${join(path, 'strength')} ${strength} of a uniform modulation is the gain itself (every channel × ${strength}); write gain: ${strength} — in sweep, the uniform scheme's strength β is a gain of 1 + β`);
        return { kind, ...common, strength };
      }
      case 'lesion':
        return this.lesion(value, path, common);
      case 'noise': {
        const sd = this.requiredNumber(value, join(path, 'sd'), 'the noise standard deviation');
        if (sd < 0) this.fail(join(path, 'sd'), `must be ≥ 0, got ${sd}`);
        let mode: 'multiplicative' | 'additive' = 'multiplicative';
        if (Object.hasOwn(value, 'mode')) {
          const m = value['mode'];
          if (m !== 'multiplicative' && m !== 'additive') this.fail(join(path, 'mode'), `must be multiplicative or additive, got ${describeValue(m)}`);
          mode = m;
        }
        const seed = Object.hasOwn(value, 'seed') ? this.seed(value['seed'], join(path, 'seed')) : 0;
        return { kind, ...common, mode, sd, seed };
      }
      case 'tuning':
      case 'sensitivity': {
        const target = this.category(value, join(path, 'target'), kind);
        const strength = this.requiredNumber(value, join(path, 'strength'), 'β in g = max(0, 1 + β·v)');
        return { kind, ...common, target, strength };
      }
    }
  }

  private lesion(value: Record<string, unknown>, path: string, common: { site: string; window?: SpatialWindow; per?: 'head'; allowNegative: boolean }): Modulation {
    const hasHeads = Object.hasOwn(value, 'heads');
    const listKey = hasHeads ? 'heads' : 'channels';
    const unit = hasHeads ? 'head' : 'channel';
    if (hasHeads && Object.hasOwn(value, 'channels')) this.fail(join(path, 'heads'), 'cannot be combined with channels; lesion either channels: [..] or heads: [..]');
    const hasChannels = Object.hasOwn(value, listKey);
    const hasTop = Object.hasOwn(value, 'top');
    if (hasChannels && hasTop) this.fail(join(path, 'top'), `cannot be combined with ${listKey}; give either ${listKey}: [..] or top: k with target`);
    if (hasChannels) {
      for (const key of ['target', 'rankBy']) {
        if (Object.hasOwn(value, key)) this.fail(join(path, key), `is only used with top: k (a lesion with ${listKey}: [..] lesions exactly those)`);
      }
      const list = value[listKey];
      const listPath = join(path, listKey);
      if (!Array.isArray(list)) this.fail(listPath, `must be a list of ${unit} indices, got ${describeValue(list)}`);
      if (list.length === 0) this.fail(listPath, `is empty; name at least one ${unit} to lesion`);
      const seen = new Set<number>();
      const channels = list.map((c: unknown, i) => {
        if (typeof c !== 'number' || !Number.isSafeInteger(c) || c < 0) this.fail(`${listPath}[${i}]`, `must be a ${unit} index (integer ≥ 0), got ${describeValue(c)}`);
        if (seen.has(c)) this.fail(`${listPath}[${i}]`, `repeats ${unit} ${c}`);
        seen.add(c);
        return c;
      });
      return hasHeads ? { kind: 'lesion', ...common, per: 'head', channels } : { kind: 'lesion', ...common, channels };
    }
    if (!hasTop) this.fail(join(path, 'channels'), 'is required: a lesion needs channels: [..], heads: [..] or top: k with target');
    const top = value['top'];
    if (typeof top !== 'number' || !Number.isSafeInteger(top) || top < 1) this.fail(join(path, 'top'), `must be an integer ≥ 1, got ${describeValue(top)}`);
    const target = this.category(value, join(path, 'target'), 'lesion with top');
    let rankBy: 'tuning' | 'sensitivity' = 'tuning';
    if (Object.hasOwn(value, 'rankBy')) {
      const r = value['rankBy'];
      if (r !== 'tuning' && r !== 'sensitivity') this.fail(join(path, 'rankBy'), `must be tuning or sensitivity, got ${describeValue(r)}`);
      rankBy = r;
    }
    return { kind: 'lesion', ...common, top, target, rankBy };
  }

  /** `per` and `headCount` (and a lesion's `heads` list, which implies `per: head`). */
  private unit(value: Record<string, unknown>, path: string, kind: ModulationKind): { per?: 'head'; headCount?: number } {
    const out: { per?: 'head'; headCount?: number } = {};
    if (Object.hasOwn(value, 'per')) {
      const per = value['per'];
      if (per !== 'feature' && per !== 'head' && per !== 'channel') this.fail(join(path, 'per'), `must be feature or head, got ${describeValue(per)}`);
      if (per === 'head') out.per = 'head';
      if (per !== 'head' && Object.hasOwn(value, 'heads')) this.fail(join(path, 'heads'), `lists heads, but per is ${per}; drop per or write per: head`);
    }
    if (Object.hasOwn(value, 'heads')) out.per = 'head';
    if (out.per === 'head' && kind === 'noise') this.fail(join(path, 'per'), 'is head, but noise is drawn per feature and position; remove per: head');
    if (Object.hasOwn(value, 'headCount')) {
      const h = value['headCount'];
      if (typeof h !== 'number' || !Number.isSafeInteger(h) || h < 1) this.fail(join(path, 'headCount'), `must be an integer ≥ 1, got ${describeValue(h)}`);
      if (out.per !== 'head') this.fail(join(path, 'headCount'), 'is only used with per: head (or a lesion with heads: [..])');
      out.headCount = h;
    }
    return out;
  }

  /** A token selection: a list of choices, or `{ at: [...], outside }`. */
  private tokens(value: unknown, path: string, allowNegative: boolean): TokenSelection {
    const list = Array.isArray(value);
    const problem = schemaProblem(list ? TOKEN_LIST : TOKEN_OBJECT, value);
    if (problem !== null) {
      this.fail(path, `must be a list of tokens (an index, class, patches or a patch [row, column]) or { at: [..], outside: G }: ${problem}`);
    }
    const parsed = list ? { at: value as TokenChoice[] } : (value as { at: TokenChoice[]; outside?: number });
    const outside = parsed.outside ?? 1;
    if (outside < 0 && !allowNegative) this.fail(join(path, 'outside'), `is ${outside}; gains must be ≥ 0`, NEGATIVE_HINT);
    const seen = new Set<string>();
    parsed.at.forEach((choice, i) => {
      const key = JSON.stringify(choice);
      if (seen.has(key)) this.fail(`${list ? path : join(path, 'at')}[${i}]`, `repeats ${key}`);
      seen.add(key);
    });
    return { at: parsed.at.map((c) => (Array.isArray(c) ? [c[0], c[1]] : c)), outside };
  }

  private vector(value: Record<string, unknown>, path: string, what: string): { values: number[]; valuesFile?: string } {
    const fieldPath = join(path, 'values');
    if (!Object.hasOwn(value, 'values')) {
      this.fail(fieldPath, `is required: give the ${what} as a list, or a path to a .npy or .csv file`);
    }
    const given = value['values'];
    if (typeof given === 'string') {
      if (given.length === 0) this.fail(fieldPath, 'is an empty path');
      const file = isAbsolute(given) ? given : resolvePath(this.folder, given);
      const values = readValuesFile(file, `${this.source}: ${fieldPath} ${JSON.stringify(given)}`);
      return { values, valuesFile: file };
    }
    if (!Array.isArray(given)) this.fail(fieldPath, `must be a list of numbers or a .npy/.csv path, got ${describeValue(given)}`);
    if (given.length === 0) this.fail(fieldPath, `is empty; give one of the ${what} per channel`);
    const values = given.map((v: unknown, i) => {
      if (typeof v !== 'number' || !Number.isFinite(v)) this.fail(`${fieldPath}[${i}]`, `must be a finite number, got ${describeValue(v)}`);
      return v;
    });
    return { values };
  }

  private window(value: unknown, path: string, allowNegative: boolean): SpatialWindow {
    if (!isRecord(value)) this.fail(path, `must be { shape: box, x0, x1, y0, y1 } or { shape: gaussian, cx, cy, sigma }, got ${describeValue(value)}`);
    const shape = value['shape'];
    if (!Object.hasOwn(value, 'shape')) this.fail(join(path, 'shape'), 'is required (box or gaussian)');
    if (shape !== 'box' && shape !== 'gaussian') this.fail(join(path, 'shape'), `must be box or gaussian, got ${describeValue(shape)}`);
    const keys: readonly string[] = shape === 'box' ? BOX_KEYS : GAUSSIAN_KEYS;
    for (const key of Object.keys(value)) {
      if (keys.includes(key)) continue;
      const near = closestHint(key, keys, 1);
      this.fail(join(path, key), `is not a key of a ${shape} window${near ? ` (${near})` : ''}; its keys: ${keys.join(', ')}`);
    }
    let outside = 1;
    if (Object.hasOwn(value, 'outside')) {
      outside = this.requiredNumber(value, join(path, 'outside'), 'the gain outside the window');
      if (outside < 0 && !allowNegative) this.fail(join(path, 'outside'), `is ${outside}; gains must be ≥ 0`, NEGATIVE_HINT);
    }
    if (shape === 'box') {
      const [x0, x1, y0, y1] = (['x0', 'x1', 'y0', 'y1'] as const).map((k) => this.unitCoordinate(value, join(path, k))) as [number, number, number, number];
      if (x0 >= x1) this.fail(join(path, 'x0'), `(${x0}) must be less than ${join(path, 'x1')} (${x1}); the box would be empty`);
      if (y0 >= y1) this.fail(join(path, 'y0'), `(${y0}) must be less than ${join(path, 'y1')} (${y1}); the box would be empty`);
      const box: BoxWindow = { shape, x0, x1, y0, y1, outside };
      return box;
    }
    const cx = this.unitCoordinate(value, join(path, 'cx'));
    const cy = this.unitCoordinate(value, join(path, 'cy'));
    const sigma = this.requiredNumber(value, join(path, 'sigma'), 'the width of the Gaussian, relative to the map');
    if (sigma <= 0) this.fail(join(path, 'sigma'), `must be > 0, got ${sigma}`);
    const gaussian: GaussianWindow = { shape, cx, cy, sigma, outside };
    return gaussian;
  }

  private unitCoordinate(value: Record<string, unknown>, path: string): number {
    const v = this.requiredNumber(value, path, 'a map-relative coordinate in [0, 1]');
    if (v < 0 || v > 1) this.fail(path, `must be in [0, 1] (map-relative; x along the width), got ${v}`);
    return v;
  }

  private requiredNumber(value: Record<string, unknown>, path: string, meaning: string): number {
    const key = path.slice(path.lastIndexOf('.') + 1);
    if (!Object.hasOwn(value, key)) this.fail(path, `is required (${meaning})`);
    const v = value[key];
    if (typeof v !== 'number' || !Number.isFinite(v)) this.fail(path, `must be a finite number, got ${describeValue(v)}`);
    return v;
  }

  private optionalBoolean(value: Record<string, unknown>, path: string, fallback: boolean): boolean {
    const key = path.slice(path.lastIndexOf('.') + 1);
    if (!Object.hasOwn(value, key)) return fallback;
    const v = value[key];
    if (typeof v !== 'boolean') this.fail(path, `must be true or false, got ${describeValue(v)}`);
    return v;
  }

  private category(value: Record<string, unknown>, path: string, usedBy: string): string {
    const key = path.slice(path.lastIndexOf('.') + 1);
    if (!Object.hasOwn(value, key)) this.fail(path, `is required: ${usedBy} needs the attended category`);
    const v = value[key];
    if (typeof v === 'number') this.fail(path, `must be a category name (text), got the number ${v}`, `quote it: target: "${v}"`);
    if (typeof v !== 'string' || v.length === 0) this.fail(path, `must be a non-empty category name, got ${describeValue(v)}`);
    return v;
  }

  private seed(v: unknown, path: string): number | string {
    if (typeof v === 'string' && v.length > 0) return v;
    if (typeof v === 'number' && Number.isSafeInteger(v) && v >= 0 && v <= 0xffffffff) return v;
    return this.fail(path, `must be an integer in [0, 4294967295] or a non-empty string, got ${describeValue(v)}`);
  }
}
