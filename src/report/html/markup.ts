/**
 * HTML text safety for the report: every string that reaches the page goes through `escapeHtml`, unless it
 * is markup this module built itself (`SafeHtml`). The `html` tag makes escaping the default: interpolated
 * strings and numbers are escaped, `SafeHtml` values (other `html` results, checked SVG) are inserted as
 * they are, arrays are joined. So a layer called `<script>` or a file called `a&b"c` can never become
 * markup, however a section is put together.
 */

/** Markup that is already safe to insert (built by `html`, or an SVG checked by `renderSvg`). */
export class SafeHtml {
  /** The markup text. */
  readonly text: string;

  /** Wraps markup text; only this module and checked renderers should call it. */
  constructor(text: string) {
    this.text = text;
  }

  /** The markup text (so template literals and `join` see the markup). */
  toString(): string {
    return this.text;
  }
}

const ENTITIES: Readonly<Record<string, string>> = { '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' };

/**
 * Escapes the five characters that matter in HTML text and in quoted attribute values (`& < > " '`).
 * @param text any string (a layer name, a category label, a file name).
 * @returns the escaped text; the empty string stays empty.
 */
export function escapeHtml(text: string): string {
  return text.replace(/[&<>"']/g, (c) => ENTITIES[c]!);
}

/** What may be interpolated into `html`: text (escaped), numbers, safe markup, lists of these; null/undefined/false print nothing. */
export type HtmlValue = string | number | SafeHtml | null | undefined | false | readonly HtmlValue[];

function render(value: HtmlValue): string {
  if (value === null || value === undefined || value === false) return '';
  if (value instanceof SafeHtml) return value.text;
  if (Array.isArray(value)) return value.map((v: HtmlValue) => render(v)).join('');
  if (typeof value === 'number') return escapeHtml(String(value));
  return escapeHtml(value as string);
}

/**
 * Tagged template for markup: the literal parts are taken as written, every interpolated value is
 * escaped unless it is `SafeHtml` (see `HtmlValue`).
 * @returns the markup as `SafeHtml`.
 */
export function html(strings: TemplateStringsArray, ...values: HtmlValue[]): SafeHtml {
  let out = strings[0]!;
  for (let i = 0; i < values.length; i++) out += render(values[i]!) + strings[i + 1]!;
  return new SafeHtml(out);
}

/** Joins markup pieces with a separator (the separator is literal markup, e.g. `<br>`). */
export function joinHtml(parts: readonly HtmlValue[], separator: string): SafeHtml {
  return new SafeHtml(parts.map((p) => render(p)).join(separator));
}
