/**
 * `writePairPictures`: the pictures of one snapshot pair (`pair-pictures.ts`) as a self-contained HTML
 * page, without a full report — for any baseline and modulated snapshot. Same page frame, caveat and
 * safety as the report (inline PNG and SVG, no script, no network).
 */
import { replaceFile } from '../../disk/atomic-file.js';
import { RuntimeFailure } from '../../errors.js';
import { assertOutFileWritable } from '../../outputs/output-file.js';
import { TOOL_VERSION } from '../../version.js';
import { html } from '../html/markup.js';
import { renderPage } from '../html/page.js';
import { CAVEAT_LINE } from '../headline.js';
import { pairPictureSections } from './pair-picture-sections.js';
import { pairPictureData, type PairPictureData, type PairPictureOptions } from './pair-pictures.js';

/** Options of `writePairPictures`. */
export interface WritePairPicturesOptions extends Omit<PairPictureOptions, 'base' | 'mod'> {
  base: string;
  mod: string;
  /** The HTML file to write; an existing one only with `force`. */
  out: string;
  force?: boolean;
}

/**
 * Collects and draws a pair's pictures and writes the page.
 * @returns the path, bytes, the picture kinds drawn and the numbers behind them.
 * @throws UsageError when `out` exists without `force` or is one of the inputs; as `pairPictureData`;
 *   RuntimeFailure when the file cannot be written.
 */
export async function writePairPictures(options: WritePairPicturesOptions): Promise<{ path: string; bytes: number; kinds: string[]; data: PairPictureData; warnings: string[] }> {
  assertOutFileWritable(options.out, { force: options.force ?? false, inputs: [{ option: 'BASE', path: options.base }, { option: 'MOD', path: options.mod }, { option: '--tuning', path: options.tuning ?? null }] });
  const data = await pairPictureData(options);
  const drawn = await pairPictureSections(data, { idPrefix: 'pictures', title: `${options.mod} against ${options.base}` });
  const headline = html`<div class="headline"><p>Pictures of ${options.mod} against its baseline ${options.base}${data.site ? ` (modulated at ${data.site}${data.target ? `, toward ${data.target}` : ''}${data.window ? ', inside a window' : ''})` : ''}: ${drawn.kinds.join(', ') || 'none could be drawn'}.</p><p class="caveat-line">${CAVEAT_LINE} <a href="#caveat">What these results are</a></p></div>`;
  const text = renderPage({ title: 'Sonde pictures', subtitle: `Sonde ${TOOL_VERSION}`, inputs: html`<p>${options.base} → ${options.mod}${options.tuning ? `; tuning ${options.tuning}` : ''}</p>`, sections: drawn.sections, headline });
  try {
    replaceFile(options.out, text);
  } catch (error) {
    const cause = (error as { cause?: unknown }).cause ?? error;
    throw new RuntimeFailure('E_PICTURES_WRITE', `cannot write ${options.out} (${(cause as NodeJS.ErrnoException).code ?? String(cause)})`, { hint: 'check that the folder exists and is writable', cause });
  }
  return { path: options.out, bytes: Buffer.byteLength(text), kinds: drawn.kinds, data, warnings: drawn.warnings };
}
