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
  const { channels, height, width } = shape;
  const gain = new Float32Array(channels).fill(1);
  const offset = new Float32Array(channels);
  let noise: NoiseSettings | null = null;
  let what: string;
  const details: ResolvedModulationRecord['details'] = {};

  switch (m.kind) {
    case 'gain':
    case 'offset': {
      const target = m.kind === 'gain' ? gain : offset;
      r.checkLength(m.values.length, channels, m.site, m.valuesFile);
      for (let k = 0; k < channels; k++) {
        target[k] = m.values[k]!;
        if (!Number.isFinite(target[k]!)) r.fail(`values[${k}]`, `is ${m.values[k]}, which overflows float32 (max ≈ 3.4e38)`);
      }
      if (m.valuesFile !== undefined) details['valuesFile'] = m.valuesFile;
      const from = m.valuesFile === undefined ? '' : ` from ${basename(m.valuesFile)}`;
      what = `${m.kind}${from} at ${JSON.stringify(m.site)} (${channels} ch; ${summarise(target)})`;
      break;
    }
    case 'uniform': {
      const g = Math.fround(m.strength);
      if (!Number.isFinite(g)) r.fail('strength', `is ${m.strength}, which overflows float32 (max ≈ 3.4e38)`);
      gain.fill(g);
      details['strength'] = m.strength;
      what = `uniform gain ×${fmt(m.strength)} at ${JSON.stringify(m.site)} (${channels} ch)`;
      break;
    }
    case 'lesion': {
      let lesioned: number[];
      if ('channels' in m) {
        m.channels.forEach((c, i) => {
          if (c >= channels) r.fail(`channels[${i}]`, `is ${c}, but site ${JSON.stringify(m.site)} has ${channels} channels (0–${channels - 1})`);
        });
        lesioned = m.channels;
        what = `lesion of ${lesioned.length}/${channels} channels at ${JSON.stringify(m.site)}: ${listChannels(lesioned)}`;
      } else {
        if (m.top > channels) r.fail('top', `is ${m.top}, but site ${JSON.stringify(m.site)} has only ${channels} channels`);
        const values = r.tableRow(m.rankBy, m.site, m.target, channels);
        lesioned = topChannels(values, m.top);
        details['top'] = m.top;
        details['target'] = m.target;
        details['rankBy'] = m.rankBy;
        what = `lesion of the top ${m.top}/${channels} channels by ${m.rankBy} for ${JSON.stringify(m.target)} at ${JSON.stringify(m.site)}: ${listChannels(lesioned)}`;
      }
      for (const c of lesioned) gain[c] = 0;
      details['channels'] = [...lesioned];
      break;
    }
    case 'noise': {
      noise = { mode: m.mode, sd: m.sd, seed: m.seed };
      what = `${m.mode} noise sd ${fmt(m.sd)} (seed ${JSON.stringify(m.seed)}) at ${JSON.stringify(m.site)} (${channels} ch)`;
      break;
    }
    case 'tuning':
    case 'sensitivity': {
      const values = r.tableRow(m.kind, m.site, m.target, channels);
      const g = gainFromValues(values, m.strength, { allowNegative: m.allowNegative });
      let clamped = 0;
      for (let k = 0; k < channels; k++) {
        gain[k] = g[k]!;
        if (!Number.isFinite(gain[k]!)) r.fail('strength', `${m.strength} makes the gain of channel ${k} overflow float32`);
        if (!m.allowNegative && 1 + m.strength * values[k]! < 0) clamped++;
      }
      details['target'] = m.target;
      details['strength'] = m.strength;
      details['clampedAtZero'] = clamped;
      details['tableValues'] = Array.from(values);
      what = `${m.kind} gain toward ${JSON.stringify(m.target)} at ${JSON.stringify(m.site)} (β = ${fmt(m.strength)}; ${channels} ch; ${summarise(gain)}${clamped > 0 ? `; ${clamped} clamped at 0` : ''})`;
      break;
    }
  }

  let weights: Float32Array | null = null;
  let outside = 1;
  if (m.window !== undefined) {
    if (height * width === 1) {
      r.fail('window', `is set, but site ${JSON.stringify(m.site)} has no spatial extent (a [N, C] vector or a 1×1 map); remove the window`);
    }
    weights = windowWeights(m.window, height, width);
    if (!weights.some((w) => w > 0)) {
      r.fail('window', `covers no position of the ${height}×${width} map of ${JSON.stringify(m.site)} (pixel centres lie at (j + 0.5)/W); widen the box`);
    }
    outside = m.window.outside;
    what += `; ${describeWindow(m.window)}`;
  }

  const source: ResolvedModulationRecord = {
    site: m.site,
    kind: m.kind,
    shape: { channels, height, width },
    gain: Array.from(gain),
    offset: Array.from(offset),
    window: m.window === undefined ? null : { ...m.window },
    outside,
    noise: noise === null ? null : { ...noise },
    allowNegative: m.allowNegative,
    details,
  };
  return {
    site: m.site,
    kind: m.kind,
    channels,
    height,
    width,
    spatial: weights !== null,
    gain,
    offset,
    window: weights,
    outside,
    noise,
    allowNegative: m.allowNegative,
    description: what,
    source,
  };
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
        this.fail('site', `${JSON.stringify(name)} cannot be modulated: it is not a float tensor with a channel axis ([N, C] or [N, C, H, W])`);
      }
      const names = this.context.siteNames.length > 0 ? this.context.siteNames : [...this.context.sites.keys()];
      const near = closestHint(name, names);
      this.fail('site', `${JSON.stringify(name)} not found (model has ${names.length} recordable tensors${near ? `; ${near}` : ''})`);
    }
    const valid = (n: number): boolean => Number.isSafeInteger(n) && n >= 1;
    if (!valid(shape.channels) || !valid(shape.height) || !valid(shape.width)) {
      throw new RuntimeFailure('E_MODULATION', `site ${JSON.stringify(name)} has an invalid shape (channels ${shape.channels}, ${shape.height}×${shape.width})`);
    }
    return shape;
  }

  checkLength(length: number, channels: number, site: string, file: string | undefined): void {
    if (length !== channels) {
      const from = file === undefined ? '' : ` (from ${file})`;
      this.fail('values', `has ${length} values${from}, but site ${JSON.stringify(site)} has ${channels} channels; give one value per channel`);
    }
  }

  /** The target category's row of a table, normalised across categories. */
  tableRow(kind: 'tuning' | 'sensitivity', site: string, target: string, channels: number): Float64Array {
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
      if (row.length !== channels) {
        this.fail(field, `needs ${channels} ${kind} values (one per channel of ${JSON.stringify(site)}), but the table has ${row.length} for category ${JSON.stringify(category)} (a table of another model?)`);
      }
      for (let k = 0; k < row.length; k++) {
        if (!Number.isFinite(row[k]!)) this.fail(field, `needs finite ${kind} values, but the table's value for site ${JSON.stringify(site)}, category ${JSON.stringify(category)}, channel ${k} is ${row[k]}`);
      }
      return row;
    });
    return normaliseAcrossCategories(rows)[targetIndex]!;
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
