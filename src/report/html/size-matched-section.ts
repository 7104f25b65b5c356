/**
 * The report section of a size-matched scheme comparison (`compareAtSize`, `comparison.json` of the
 * demo): held-out ROC-area change of each scheme at one size of site modulation, with its bootstrap
 * interval, beside the shuffled, criterion-shift and ceiling references.
 */
import type { SizeMatchedComparison } from '../../replay/size-matched.js';
import { html, SafeHtml } from './markup.js';
import type { PageSection } from './page.js';
import { fmt, pct, sgn } from './tables.js';

const NUM = new SafeHtml(' class="num"');

function interval(i: { estimate: unknown; low: unknown; high: unknown }): string {
  return `${sgn(i.estimate, 3)} [${sgn(i.low, 3)}, ${sgn(i.high, 3)}]`;
}

/** A site, or "all N sites" for the sites of a several-site row (joined by +; listed once under the table). */
function siteName(site: string): string {
  const parts = site.split('+');
  return parts.length > 1 ? `all ${parts.length} sites` : site;
}

/** The sites of the several-site rows, one line each: "all N sites: a, b, …". */
function severalSiteNotes(sites: readonly string[]): string[] {
  return [...new Set(sites.filter((site) => site.includes('+')))].map((site) => `${siteName(site)}: ${site.split('+').join(', ')}`);
}

/** One line describing the comparison (the report's inputs table). */
export function describeSizeMatched(c: SizeMatchedComparison): string {
  return `${c.heldOut ? 'held out' : 'not held out'}: gains from ${c.fitSet}, detection on ${c.heldOutSet}; site modulation ${pct(c.size)}; ${c.categories.length} cued categories; ${c.effects.length} scheme rows`;
}

/**
 * The section: a lead, per comparison its forest plot (when given), the table, and the tuning-vs-shuffled
 * intervals.
 * @param list the comparisons and their names.
 * @param figures one rendered forest plot per comparison, in the same order (optional).
 * @param short how a site is named in the table (default: as it is; the full name is in the cell's title).
 */
export function sizeMatchedSection(list: ReadonlyArray<{ name: string; comparison: SizeMatchedComparison }>, figures: readonly SafeHtml[] = [], short: (site: string) => string = (s) => s): PageSection | null {
  if (list.length === 0) return null;
  const parts = list.map(({ name, comparison: c }, index) => {
    const head = ['site', 'scheme', 'size', 'ΔAUC [95 % CI]', 'of ceiling', 'Δhit, fixed threshold', 'Δhit, shift alone', 'Δfalse alarms', 'ceiling, fitting set'];
    const rows = c.effects.map(
      (e) =>
        html`<tr><td title="${e.site.split('+').join(', ')}">${e.site.includes('+') ? siteName(e.site) : short(e.site)}</td><td>${e.scheme}</td><td${NUM}>${pct(e.size)}</td><td${NUM}>${interval(e.aucChange)}</td><td${NUM}>${e.fractionOfCeiling === null ? '–' : pct(e.fractionOfCeiling, 0)}</td><td${NUM}>${sgn(e.hitRatePp, 1)} pp</td><td${NUM}>${sgn(e.criterionShiftHitRatePp, 1)} pp</td><td${NUM}>${sgn(e.falseAlarmRatePp, 1)} pp</td><td${NUM}>${e.fitSetAucChange === null || e.fitSetAucChange === undefined ? '–' : sgn(e.fitSetAucChange, 3)}</td></tr>`,
    );
    const notes = severalSiteNotes(c.effects.map((e) => e.site)).map((line) => html`<p class="note">${line}</p>`);
    const shuffled = c.versusShuffled.map((v) => html`<li>${v.site.includes('+') ? siteName(v.site) : short(v.site)}: ${v.site.includes('+') ? 'tuning-all − shuffled-all' : 'tuning − shuffled'} ΔAUC ${interval(v.difference)}</li>`);
    return html`${list.length > 1 ? html`<h3>${name}</h3>` : ''}${figures[index] ?? ''}<p class="note">Unmodulated held-out ROC area ${fmt(c.baseAuc, 3)} (mean over ${c.categories.length} cued categories); ${fmt(c.resamples, 0)} bootstrap resamples of the held-out stimuli, the same for every row.</p><div class="table-wrap"><table><thead><tr>${head.map((h, i) => html`<th${i >= 2 ? NUM : new SafeHtml('')}>${h}</th>`)}</tr></thead><tbody>${rows}</tbody></table></div>${notes}<ul class="verdicts">${shuffled}</ul>`;
  });
  return {
    id: 'size-matched',
    heading: 'Schemes at one size of modulation (held out)',
    body: html`<p class="lead">Every gain is scaled to the same weighted mean |g − 1| at its site; gains come from one stimulus set, detection is measured on another. The ROC area does not depend on the decision threshold: a criterion shift alone (a constant added to the readout that reproduces a scheme's false alarms) changes the hit rate but leaves it unchanged. The ceiling is the gain of at most the same size fitted to maximise the ROC area on the fitting set (stopped early, so its size can stay below the budget; its ΔAUC on the fitting set is in the last column); "of ceiling" is a scheme's ΔAUC as a fraction of the ceiling's held-out ΔAUC. "Δhit, shift alone": the hit-rate change a constant readout shift with the scheme's false alarms gives.</p>${parts}`,
  };
}
