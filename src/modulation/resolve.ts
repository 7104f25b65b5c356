/**
 * Resolution: a validated spec plus what the model (and optional tuning/sensitivity tables) say about
 * each site → per-site gain and offset vectors, window weights and noise settings, ready to be written
 * into the injected G and B inputs by `fillModulationInputs`.
 *
 * Table kinds (`tuning`, `sensitivity`, `lesion` with `top`) read one vector per category for the site,
 * z-score every channel across all known categories (`normaliseAcrossCategories`; a table already
 * z-scored with the population SD passes through unchanged) and use the target category's row v:
 * g_k = max(0, 1 + β·v_k) (clamp skipped with `allowNegative`), or the `top` channels by v are lesioned
 * (ties go to the lower channel index).
 *
 * Sites are feature maps, vectors and token tensors alike (`SiteShape`, site-shape.ts): the vectors are
 * per feature; with `per: head` they are per head and expand to the head's features; a window falls on
 * the site's grid (a map, or the patch grid of tokens) and a token selection on token positions, both
 * as position weights.
 */
import { basename } from 'node:path';
import { closestHint, RuntimeFailure, UsageError } from '../errors.js';
import { gainFromValues, normaliseAcrossCategories, topChannels } from './gain-pattern.js';
import type {
  Modulation,
  ModulationSpec,
  NoiseSettings,
  ResolveContext,
  ResolvedModulation,
  ResolvedModulationRecord,
  SiteShape,
  SpatialWindow,
  TokenSelection,
} from './types.js';
import { windowWeights } from './window.js';

const TABLE_COMMANDS = {
  tuning: 'sonde tune SNAPSHOT --out TUNING.arrow',
  sensitivity: 'sonde sense MODEL --stimuli ... --site SITE --readout OUTPUT --out SENS.arrow',
} as const;

/**
 * Resolves every modulation of a spec against a model.
 * @param spec A validated spec (`parseModulationSpec`).
 * @param context Site shapes, optional category list and tables, and every recordable tensor name.
 * @returns One `ResolvedModulation` per spec entry, in spec order.
 * @throws UsageError (message prefixed with the spec source and field path) when a site is not found
 *   (with closest names) or cannot be modulated, a vector's length differs from the channel count (both
 *   numbers given), a value overflows float32, a lesion channel is out of range, `top` exceeds the
 *   channel count, a category is unknown (known ones listed), a needed table is missing (naming the
 *   command that makes one) or lacks the site, a window is set on a site without spatial extent, or a
 *   box window covers no pixel centre of the map. RuntimeFailure when the context reports an invalid
 *   site shape.
 */
export function resolveModulations(spec: ModulationSpec, context: ResolveContext): ResolvedModulation[] {
  return spec.modulations.map((modulation, i) => {
    const path = spec.form === 'list' ? `modulations[${i}]` : '';
    return resolveOne(modulation, new Resolver(spec.source, path, context));
  });
}

function resolveOne(m: Modulation, r: Resolver): ResolvedModulation {
  const shape = r.site(m.site);
  const features = shape.features;
  const heads = m.per === 'head' ? r.heads(m, shape) : null;
  // `units` is what the spec's vectors index: features, or heads (expanded to their features below)
  const units = heads ?? features;
  // words for messages: a map's channels, a token tensor's features, an attention tensor's heads (its features)
  const unitWord = heads !== null || shape.layout.kind === 'heads' ? 'head' : shape.layout.kind === 'channels-first' || shape.layout.kind === 'vector' ? 'channel' : 'feature';
  const ch = `${units} ${unitWord === 'head' ? 'heads' : unitWord === 'channel' ? 'ch' : 'features'}`;
  const gain = new Float32Array(units).fill(1);
  const offset = new Float32Array(units);
  let noise: NoiseSettings | null = null;
  let what: string;
  const details: ResolvedModulationRecord['details'] = {};

  switch (m.kind) {
    case 'gain':
    case 'offset': {
      const target = m.kind === 'gain' ? gain : offset;
      r.checkLength(m.values.length, units, m.site, m.valuesFile, unitWord);
      for (let k = 0; k < units; k++) {
        target[k] = m.values[k]!;
        if (!Number.isFinite(target[k]!)) r.fail(`values[${k}]`, `is ${m.values[k]}, which overflows float32 (max ≈ 3.4e38)`);
      }
      if (m.valuesFile !== undefined) details['valuesFile'] = m.valuesFile;
      const from = m.valuesFile === undefined ? '' : ` from ${basename(m.valuesFile)}`;
      what = `${m.kind}${from} at ${JSON.stringify(m.site)} (${ch}; ${summarise(target)})`;
      break;
    }
    case 'uniform': {
      const g = Math.fround(m.strength);
      if (!Number.isFinite(g)) r.fail('strength', `is ${m.strength}, which overflows float32 (max ≈ 3.4e38)`);
      gain.fill(g);
      details['strength'] = m.strength;
      what = `uniform gain ×${fmt(m.strength)} at ${JSON.stringify(m.site)} (${ch})`;
      break;
    }
    case 'lesion': {
      let lesioned: number[];
      const plural = `${unitWord}s`;
      if ('channels' in m) {
        const field = heads !== null ? 'heads' : 'channels';
        m.channels.forEach((c, i) => {
          if (c >= units) r.fail(`${field}[${i}]`, `is ${c}, but site ${JSON.stringify(m.site)} has ${units} ${plural} (0–${units - 1})`);
        });
        lesioned = m.channels;
        what = `lesion of ${lesioned.length}/${units} ${plural} at ${JSON.stringify(m.site)}: ${listChannels(lesioned)}`;
      } else {
        if (m.top > units) r.fail('top', `is ${m.top}, but site ${JSON.stringify(m.site)} has only ${units} ${plural}`);
        const values = r.tableRow(m.rankBy, m.site, m.target, features, heads);
        lesioned = topChannels(values, m.top);
        details['top'] = m.top;
        details['target'] = m.target;
        details['rankBy'] = m.rankBy;
        what = `lesion of the top ${m.top}/${units} ${plural} by ${m.rankBy} for ${JSON.stringify(m.target)} at ${JSON.stringify(m.site)}: ${listChannels(lesioned)}`;
      }
      for (const c of lesioned) gain[c] = 0;
      details[heads !== null ? 'heads' : 'channels'] = [...lesioned];
      break;
    }
    case 'noise': {
      noise = { mode: m.mode, sd: m.sd, seed: m.seed };
      what = `${m.mode} noise sd ${fmt(m.sd)} (seed ${JSON.stringify(m.seed)}) at ${JSON.stringify(m.site)} (${ch})`;
      break;
    }
    case 'tuning':
    case 'sensitivity': {
      const values = r.tableRow(m.kind, m.site, m.target, features, heads);
      const g = gainFromValues(values, m.strength, { allowNegative: m.allowNegative });
      let clamped = 0;
      for (let k = 0; k < units; k++) {
        gain[k] = g[k]!;
        if (!Number.isFinite(gain[k]!)) r.fail('strength', `${m.strength} makes the gain of ${unitWord} ${k} overflow float32`);
        if (!m.allowNegative && 1 + m.strength * values[k]! < 0) clamped++;
      }
      details['target'] = m.target;
      details['strength'] = m.strength;
      details['clampedAtZero'] = clamped;
      details['tableValues'] = Array.from(values);
      what = `${m.kind} gain toward ${JSON.stringify(m.target)} at ${JSON.stringify(m.site)} (β = ${fmt(m.strength)}; ${ch}; ${summarise(gain)}${clamped > 0 ? `; ${clamped} clamped at 0` : ''})`;
      break;
    }
  }
  if (heads !== null) {
    details['per'] = 'head';
    details['headCount'] = heads;
  }

  let weights: Float32Array | null = null;
  let outside = 1;
  if (m.window !== undefined) {
    const grid = shape.grid;
    if (grid === null || grid.height * grid.width === 1) {
      const why = shape.layout.kind === 'tokens' ? 'a token tensor without a patch grid (its token count is not a prefix plus a square)' : 'no spatial extent (a [N, C] vector or a 1×1 map)';
      r.fail('window', `is set, but site ${JSON.stringify(m.site)} has ${why}; remove the window${shape.layout.kind === 'tokens' ? ' or select tokens with tokens: [..]' : ''}`);
    }
    weights = positionWeights(windowWeights(m.window, grid.height, grid.width), grid.prefix, shape.positions);
    if (!weights.some((w) => w > 0)) {
      r.fail('window', `covers no position of the ${grid.height}×${grid.width} ${shape.layout.kind === 'tokens' ? 'patch grid' : 'map'} of ${JSON.stringify(m.site)} (pixel centres lie at (j + 0.5)/W); widen the box`);
    }
    outside = m.window.outside;
    what += `; ${describeWindow(m.window)}`;
  } else if (m.tokens !== undefined) {
    weights = r.tokenWeights(m.tokens, shape, m.site);
    outside = m.tokens.outside;
    what += `; ${describeTokens(m.tokens, weights)}`;
  }

  if (shape.shared && (noise !== null || weights !== null)) {
    r.fail(noise !== null ? 'kind' : m.window !== undefined ? 'window' : 'tokens', `${noise !== null ? 'is noise' : 'is set'}, but site ${JSON.stringify(m.site)} merges the batch with other axes (its first axis is not the batch), so it takes only a gain or offset shared by every stimulus and position; modulate a batch-first tensor instead`);
  }
  const perFeatureGain = heads === null ? gain : expandHeads(gain, heads, features);
  const perFeatureOffset = heads === null ? offset : expandHeads(offset, heads, features);
  const source: ResolvedModulationRecord = {
    site: m.site,
    kind: m.kind,
    shape: recordShape(shape),
    gain: Array.from(perFeatureGain),
    offset: Array.from(perFeatureOffset),
    window: m.window === undefined ? null : { ...m.window },
    ...(m.tokens !== undefined ? { tokens: { at: m.tokens.at.map((c) => (Array.isArray(c) ? [c[0], c[1]] as [number, number] : c)), outside: m.tokens.outside } } : {}),
    outside,
    noise: noise === null ? null : { ...noise },
    allowNegative: m.allowNegative,
    details,
  };
  return {
    site: m.site,
    kind: m.kind,
    siteShape: shape,
    features,
    positions: shape.positions,
    spatial: weights !== null,
    unit: heads !== null ? 'head' : 'feature',
    heads,
    gain: perFeatureGain,
    offset: perFeatureOffset,
    window: weights,
    outside,
    noise,
    allowNegative: m.allowNegative,
    description: what,
    source,
  };
}

/** Head values [H] → feature values [F]: head h covers features h·d … h·d + d − 1 (d = F / H), the layout of concatenated heads. */
function expandHeads(values: Float32Array, heads: number, features: number): Float32Array {
  const d = features / heads;
  const out = new Float32Array(features);
  for (let h = 0; h < heads; h++) out.fill(values[h]!, h * d, (h + 1) * d);
  return out;
}

/** Grid weights [H·W] → position weights [P]: grid cell (h, w) is position prefix + h·W + w; positions outside the grid weigh 0. */
function positionWeights(grid: Float32Array, prefix: number, positions: number): Float32Array {
  if (prefix === 0 && grid.length === positions) return grid;
  const out = new Float32Array(positions);
  out.set(grid, prefix);
  return out;
}

/** The manifest's shape record: the pre-layout form for maps and vectors, features/positions/dims otherwise. */
function recordShape(shape: SiteShape): ResolvedModulationRecord['shape'] {
  const kind = shape.layout.kind;
  if (!shape.shared && kind === 'channels-first' && shape.shape.length === 3) return { channels: shape.features, height: shape.shape[1]!, width: shape.shape[2]! };
  if (!shape.shared && kind === 'vector') return { channels: shape.features, height: 1, width: 1 };
  return { features: shape.features, positions: shape.positions, dims: [...shape.shape], layout: kind, shared: shape.shared === true };
}

function describeTokens(tokens: TokenSelection, weights: Float32Array): string {
  let chosen = 0;
  for (let p = 0; p < weights.length; p++) if (weights[p]! > 0) chosen++;
  const shown = tokens.at.slice(0, 6).map((c) => (Array.isArray(c) ? `[${c[0]}, ${c[1]}]` : String(c))).join(', ');
  return `tokens ${shown}${tokens.at.length > 6 ? ', …' : ''} (${chosen}/${weights.length}), outside ${fmt(tokens.outside)}`;
}

/** Messages and lookups for one modulation. */
class Resolver {
  constructor(
    private readonly source: string,
    private readonly path: string,
    private readonly context: ResolveContext,
  ) {}

  fail(field: string, message: string, hint?: string): never {
    const at = this.path === '' ? field : `${this.path}.${field}`;
    throw new UsageError('E_MODULATION', `${this.source}: ${at} ${message}`, hint === undefined ? {} : { hint });
  }

  site(name: string): SiteShape {
    const shape = this.context.sites.get(name);
    if (shape === undefined) {
      if (this.context.siteNames.includes(name)) {
        this.fail('site', `${JSON.stringify(name)} cannot be modulated: it is not a float tensor with a feature axis ([N, C], [N, C, H, W] or tokens [N, T, D])`);
      }
      const names = this.context.siteNames.length > 0 ? this.context.siteNames : [...this.context.sites.keys()];
      const near = closestHint(name, names);
      this.fail('site', `${JSON.stringify(name)} not found (model has ${names.length} recordable tensors${near ? `; ${near}` : ''})`);
    }
    const valid = (n: number): boolean => Number.isSafeInteger(n) && n >= 1;
    if (!valid(shape.features) || !valid(shape.positions) || shape.shape.length === 0 || !shape.shape.every(valid)) {
      throw new RuntimeFailure('E_MODULATION', `site ${JSON.stringify(name)} has an invalid shape ([${shape.shape.join(', ')}], ${shape.features} features)`);
    }
    return shape;
  }

  /** Heads of a `per: head` modulation: `headCount`, else the site's (layout or graph); must divide the feature count. */
  heads(m: Modulation, shape: SiteShape): number {
    const given = m.headCount ?? shape.heads;
    if (given === undefined) {
      this.fail('per', `is head, but the number of heads of ${JSON.stringify(m.site)} is not known from the model; give it with headCount: H (H divides its ${shape.features} features)`, 'heads are separate features only before the attention output projection (in torchvision exports: the tensor its Gemm/MatMul reads, listed by `sonde layers --skipped`)');
    }
    if (shape.features % given !== 0) {
      this.fail(m.headCount !== undefined ? 'headCount' : 'per', `${m.headCount !== undefined ? `is ${given}` : `is head with the model's ${given} heads`}, which does not divide the ${shape.features} features of ${JSON.stringify(m.site)}; give a head count that does`);
    }
    if (m.headCount !== undefined && shape.heads !== undefined && shape.heads !== m.headCount) {
      this.fail('headCount', `is ${m.headCount}, but the model splits ${JSON.stringify(m.site)} into ${shape.heads} heads; remove headCount or give ${shape.heads}`);
    }
    return given;
  }

  /** Weights [P] of a token selection: 1 on the chosen tokens, 0 elsewhere. */
  tokenWeights(tokens: TokenSelection, shape: SiteShape, site: string): Float32Array {
    if (shape.layout.kind !== 'tokens' || shape.shared) {
      this.fail('tokens', `is set, but site ${JSON.stringify(site)} is not a token tensor (${shape.shared ? 'its first axis is not the batch' : `layout ${shape.layout.kind}`}); use a window on feature maps`);
    }
    const T = shape.positions;
    const grid = shape.grid;
    const weights = new Float32Array(T);
    tokens.at.forEach((choice, i) => {
      const at = `tokens[${i}]`;
      if (typeof choice === 'number') {
        if (choice >= T) this.fail(at, `is token ${choice}, but site ${JSON.stringify(site)} has ${T} tokens (0–${T - 1})`);
        weights[choice] = 1;
      } else if (choice === 'class') {
        if (grid === null || grid.prefix === 0) this.fail(at, `is class, but site ${JSON.stringify(site)} has no class token (${grid === null ? 'no patch grid' : `its ${T} tokens are all patches`}); give a token index`);
        weights[0] = 1;
      } else {
        if (grid === null) this.fail(at, `${choice === 'patches' ? 'is patches' : `is patch [${choice[0]}, ${choice[1]}]`}, but site ${JSON.stringify(site)} has no patch grid (${T} tokens is not a prefix plus a square); give token indices`);
        if (choice === 'patches') weights.fill(1, grid.prefix, grid.prefix + grid.height * grid.width);
        else {
          const [row, column] = choice;
          if (row >= grid.height || column >= grid.width) this.fail(at, `is patch [${row}, ${column}], but the patch grid of ${JSON.stringify(site)} is ${grid.height}×${grid.width} (rows 0–${grid.height - 1}, columns 0–${grid.width - 1})`);
          weights[grid.prefix + row * grid.width + column] = 1;
        }
      }
    });
    return weights;
  }

  checkLength(length: number, units: number, site: string, file: string | undefined, unit: string): void {
    if (length !== units) {
      const from = file === undefined ? '' : ` (from ${file})`;
      const plural = unit === 'channel' ? 'channels' : `${unit}s`;
      this.fail('values', `has ${length} values${from}, but site ${JSON.stringify(site)} has ${units} ${plural}; give one value per ${unit}`);
    }
  }

  /**
   * The target category's row of a table, normalised across categories; with `heads`, one value per
   * head: a table with one value per head is used as it is, a per-feature table is averaged over each
   * head's features after the normalisation.
   */
  tableRow(kind: 'tuning' | 'sensitivity', site: string, target: string, channels: number, heads: number | null = null): Float64Array {
    const lookup = this.context.tables?.[kind];
    const field = 'target';
    if (lookup === undefined) {
      this.fail(field, `needs a ${kind} table for ${JSON.stringify(site)} and none was given: pass it with --${kind} TABLE.arrow (sonde record, sweep), or make one with \`${TABLE_COMMANDS[kind]}\``);
    }
    const categories = this.context.categories ?? [];
    if (categories.length === 0) {
      this.fail(field, `needs the category list of the ${kind} table, and it is empty; make a table with \`${TABLE_COMMANDS[kind]}\``);
    }
    const targetIndex = categories.indexOf(target);
    if (targetIndex < 0) {
      const near = closestHint(target, categories, 1);
      const known = categories.map((c) => JSON.stringify(c)).join(', ');
      this.fail(field, `${JSON.stringify(target)} is not a known category (known: ${known}${near ? `; ${near}` : ''})`);
    }
    const rows = categories.map((category) => {
      const row = lookup(site, category);
      if (row === undefined) {
        this.fail(field, `needs ${kind} values for site ${JSON.stringify(site)}, category ${JSON.stringify(category)}, which the table lacks; make one that covers the site with \`${TABLE_COMMANDS[kind]}\``);
      }
      if (row.length !== channels && (heads === null || row.length !== heads)) {
        const expected = heads === null ? `${channels} ${kind} values (one per channel of ${JSON.stringify(site)})` : `${heads} or ${channels} ${kind} values (one per head or per feature of ${JSON.stringify(site)})`;
        this.fail(field, `needs ${expected}, but the table has ${row.length} for category ${JSON.stringify(category)} (a table of another model?)`);
      }
      for (let k = 0; k < row.length; k++) {
        if (!Number.isFinite(row[k]!)) this.fail(field, `needs finite ${kind} values, but the table's value for site ${JSON.stringify(site)}, category ${JSON.stringify(category)}, channel ${k} is ${row[k]}`);
      }
      return row;
    });
    const normalised = normaliseAcrossCategories(rows)[targetIndex]!;
    if (heads === null || normalised.length === heads) return normalised;
    const d = channels / heads;
    const perHead = new Float64Array(heads);
    for (let h = 0; h < heads; h++) {
      let sum = 0;
      for (let k = h * d; k < (h + 1) * d; k++) sum += normalised[k]!;
      perHead[h] = sum / d;
    }
    return perHead;
  }
}

function fmt(x: number): string {
  return String(Number(x.toPrecision(4)));
}

function summarise(v: Float32Array): string {
  let sum = 0;
  let min = Infinity;
  let max = -Infinity;
  for (let k = 0; k < v.length; k++) {
    const x = v[k]!;
    sum += x;
    if (x < min) min = x;
    if (x > max) max = x;
  }
  return `mean ${fmt(sum / v.length)}, range ${fmt(min)} to ${fmt(max)}`;
}

function listChannels(channels: readonly number[]): string {
  const shown = channels.slice(0, 8).join(', ');
  return channels.length > 8 ? `${shown}, … (${channels.length} in all)` : shown;
}

function describeWindow(w: SpatialWindow): string {
  const outside = `outside ${fmt(w.outside)}`;
  if (w.shape === 'box') return `box window x ∈ [${fmt(w.x0)}, ${fmt(w.x1)}) y ∈ [${fmt(w.y0)}, ${fmt(w.y1)}), ${outside}`;
  return `gaussian window at (${fmt(w.cx)}, ${fmt(w.cy)}) σ ${fmt(w.sigma)}, ${outside}`;
}
