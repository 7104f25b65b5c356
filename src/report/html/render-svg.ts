/**
 * Turns a vega-lite spec into an inline SVG string, in Node, without a browser or canvas: vega-lite
 * compiles the spec to vega, a headless vega View (`renderer: 'none'`) renders it with `toSVG()`.
 *
 * Vega escapes text marks and attribute values itself; on top of that the result is checked (no script,
 * event handler, link or foreign content may appear) and made fit for a page that holds several charts:
 * element ids (clip paths, gradients) get a per-chart prefix so they cannot collide, and the unused xlink
 * namespace declaration is dropped so the SVG namespace is the only URL left in the markup.
 */
import * as vega from 'vega';
import { compile, type TopLevelSpec } from 'vega-lite';
import { RuntimeFailure } from '../../errors.js';
import { SafeHtml } from './markup.js';

/** A rendered chart and what vega-lite/vega warned about while making it. */
export interface RenderedSvg {
  svg: SafeHtml;
  /** Warnings of the compiler and the view (e.g. a scale with no valid values), in order. */
  warnings: string[];
}

/** A vega logger that keeps warnings and errors instead of printing them. */
function collectingLogger(sink: string[]): vega.LoggerInterface {
  let level = vega.Warn;
  const logger: vega.LoggerInterface = {
    level(value?: number) {
      if (value === undefined) return level;
      level = value;
      return logger;
    },
    error(...args: unknown[]) {
      sink.push(`error: ${args.map(String).join(' ')}`);
      return logger;
    },
    warn(...args: unknown[]) {
      if (level >= vega.Warn) sink.push(args.map(String).join(' '));
      return logger;
    },
    info() {
      return logger;
    },
    debug() {
      return logger;
    },
  };
  return logger;
}

/** Elements vega's SVG renderer writes for the marks the report uses; anything else is refused. */
const ALLOWED_ELEMENTS = new Set(['svg', 'g', 'rect', 'path', 'text', 'tspan', 'defs', 'clippath', 'lineargradient', 'radialgradient', 'stop', 'title', 'desc', 'circle', 'line', 'polyline', 'polygon', 'ellipse']);

/** A tag with double-quoted attribute values (the only form vega writes). */
const TAG = /<(\/?)([a-zA-Z][a-zA-Z0-9:-]*)((?:\s+[^\s="'<>\/]+(?:="[^"<]*")?)*)\s*(\/?)>/g;
const ATTRIBUTE = /\s+([^\s="'<>\/]+)(?:="([^"]*)")?/g;

function refuse(idPrefix: string, what: string): never {
  throw new RuntimeFailure('E_REPORT_SVG', `chart ${idPrefix} rendered with ${what} in its SVG; refusing to embed it`, { hint: 'report this as a bug with the input that caused it' });
}

/**
 * Checks that an SVG is inert markup: every `<` opens a well-formed tag of an allowed element
 * (`ALLOWED_ELEMENTS`), no attribute is an event handler or a link (`on…`, `href`, `src`), and no
 * attribute value refers to anything but an element of the same SVG (`url(#…)`) or holds a script URL.
 * Text and attribute values are otherwise free: vega escapes them, so `&lt;script&gt;` in a label is fine.
 * @param svg the SVG text.
 * @param idPrefix the chart's id, for the error message.
 * @throws RuntimeFailure naming what was found.
 */
export function assertInertSvg(svg: string, idPrefix: string): void {
  for (const match of svg.matchAll(TAG)) {
    const element = match[2]!.toLowerCase();
    if (!ALLOWED_ELEMENTS.has(element)) refuse(idPrefix, `a <${element}> element`);
    for (const attribute of (match[3] ?? '').matchAll(ATTRIBUTE)) {
      const name = attribute[1]!.toLowerCase();
      const value = (attribute[2] ?? '').toLowerCase();
      if (name.startsWith('on')) refuse(idPrefix, `an event-handler attribute (${name})`);
      if (name === 'href' || name.endsWith(':href') || name === 'src') refuse(idPrefix, `a link (${name})`);
      if (value.includes('javascript:')) refuse(idPrefix, 'a javascript: URL');
      for (const url of value.matchAll(/url\(([^)]*)\)/g)) if (!url[1]!.trim().startsWith('#')) refuse(idPrefix, `an external reference (url(${url[1]}))`);
    }
  }
  if (svg.replace(TAG, '').includes('<')) refuse(idPrefix, 'markup that is not a well-formed tag');
}

/**
 * Makes one rendered SVG safe and unique within a page: checks it (`assertInertSvg`), renames its ids to
 * `PREFIX-1`, `PREFIX-2`… (in order of appearance) together with the `url(#…)` references to them, and
 * drops the xlink namespace declaration when nothing uses it. A reference to an id the SVG does not
 * define is renamed to `PREFIX-missing-…` (it pointed at nothing before, and still does).
 * @param svg the SVG text from vega.
 * @param idPrefix a prefix unique to this chart in the page (letters, digits, `-`).
 * @returns the SVG text.
 * @throws RuntimeFailure when the SVG holds anything active (see `assertInertSvg`).
 */
export function sanitiseSvg(svg: string, idPrefix: string): string {
  assertInertSvg(svg, idPrefix);
  // vega numbers clip paths with a process-wide counter: renumber per chart so the page is reproducible
  const renamed = new Map<string, string>();
  for (const match of svg.matchAll(/\sid="([^"]+)"/g)) if (!renamed.has(match[1]!)) renamed.set(match[1]!, `${idPrefix}-${renamed.size + 1}`);
  const rename = (id: string) => renamed.get(id) ?? `${idPrefix}-missing-${id}`;
  let out = svg.replace(/\sid="([^"]+)"/g, (_m, id: string) => ` id="${rename(id)}"`).replace(/url\(#([^)]+)\)/g, (_m, id: string) => `url(#${rename(id)})`);
  if (!/\sxlink:[a-z]+=/.test(out)) out = out.replace(/\sxmlns:xlink="[^"]*"/, '');
  return out;
}

/**
 * Renders a vega-lite spec to inline SVG.
 * @param spec the vega-lite spec (inline data only; no URLs).
 * @param idPrefix prefix for the SVG's element ids, unique within the page.
 * @returns the checked SVG and the warnings collected while compiling and rendering.
 * @throws RuntimeFailure when vega cannot render the spec, or the SVG fails the check.
 */
export async function renderSvg(spec: TopLevelSpec, idPrefix: string): Promise<RenderedSvg> {
  const warnings: string[] = [];
  const logger = collectingLogger(warnings);
  let svg: string;
  try {
    const compiled = compile(spec, { logger }).spec;
    const view = new vega.View(vega.parse(compiled), { renderer: 'none', logger, logLevel: vega.Warn });
    try {
      svg = await view.toSVG();
    } finally {
      view.finalize();
    }
  } catch (error) {
    throw new RuntimeFailure('E_REPORT_CHART', `chart ${idPrefix} could not be rendered (${(error as Error).message.split('\n')[0]})`, { cause: error });
  }
  return { svg: new SafeHtml(sanitiseSvg(svg, idPrefix)), warnings };
}

/**
 * The drawn width of a rendered chart (its `width` attribute), for layouts that keep charts readable on
 * narrow screens; 0 when it has none.
 */
export function svgWidth(svg: SafeHtml): number {
  const match = /^<svg[^>]*\swidth="(\d+(?:\.\d+)?)"/.exec(svg.text);
  return match ? Number(match[1]) : 0;
}
