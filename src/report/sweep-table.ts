/**
 * The terminal print-out of a sweep: per measure a site × scheme grid over strengths, the best cell per
 * site, calibration (rows that did not reach the target folded into one line), the evaluation line and
 * the summary. Sites are named by short unique labels (full names listed once below the first grid when
 * they differ); every table fits `width` (split into parts repeating site and scheme) and text wraps.
 */
import type { SweepCell, SweepResult } from '../replay/sweep-types.js';
import { fixed, signed } from '../format.js';
import { shortLayerLabels } from './layer-labels.js';
import { fitTable, wrapText } from './terminal-table.js';

/** Options of `renderSweep`. */
export interface RenderSweepOptions {
  /** Terminal columns to fit (default: no limit). */
  width?: number;
  /** The sweep's output folder, named in the last line. */
  out?: string;
}

/**
 * Renders a sweep result for the terminal (see the module comment).
 * @param result the sweep result.
 * @param options width and output folder.
 * @returns the text, ending in a newline.
 */
export function renderSweep(result: SweepResult, options: RenderSweepOptions = {}): string {
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const labels = shortLayerLabels(result.sites);
  const site = (name: string) => labels.get(name) ?? name;
  const wrap = (text: string) => wrapText(text, width, '  ');
  const out: string[] = [];
  const grid = (pick: (c: SweepCell) => number, digits: number): string => {
    const rows: string[][] = [];
    for (const s of result.sites) {
      for (const scheme of result.schemes) {
        const row = result.strengths.map((strength) => {
          const chosen = result.cells.filter((c) => c.site === s && c.scheme === scheme && c.strength === strength);
          return chosen.length === 0 ? '' : signed(chosen.reduce((sum, c) => sum + pick(c), 0) / chosen.length, digits);
        });
        rows.push([site(s), scheme, ...row]);
      }
    }
    return fitTable(['site', 'scheme', ...result.strengths.map((s) => `β=${s}`)], rows, { width, keyColumns: 2 });
  };
  out.push(wrap(`mean change in ROC area (AUC, threshold-free) over ${result.categories.length} cued ${result.categories.length === 1 ? 'category' : 'categories'}:`), grid((c) => c.change.auc, 3));
  const renamed = result.sites.filter((s) => site(s) !== s);
  if (renamed.length > 0) out.push(wrap(`sites: ${renamed.map((s) => `${site(s)} = ${s}`).join('; ')}`));
  out.push(wrap('mean change in d′ at the threshold fixed on the baseline (moves with the criterion too):'), grid((c) => c.change.dPrime, 2));
  out.push(wrap("mean change in hit rate at the baseline's false-alarm rate (pp):"), grid((c) => c.change.matchedHitRatePp, 1));
  const best = result.best.map((b) => [site(b.site), b.scheme, fixed(b.strength, 2), signed(b.aucChange, 3), signed(b.dPrimeChange), `${signed(b.accuracyPp, 1)} pp`, `${fixed(100 * b.siteActivityChange, 1)} %`]);
  out.push(fitTable(['site', `best (by ${result.measure === 'auc' ? 'ΔAUC' : 'Δd′'})`, 'strength', 'ΔAUC', 'Δd′', 'Δaccuracy', 'site activity'], best, { width, keyColumns: 1 }));
  if (result.calibration.length > 0) {
    const reached = result.calibration.filter((c) => c.strength !== null);
    const missed = result.calibration.filter((c) => c.strength === null);
    const band = `in ${100 * result.band.low}–${100 * result.band.high} % band`;
    if (reached.length > 0) {
      const rows = reached.map((c) => [site(c.site), c.scheme, c.target, fixed(c.strength, 3), c.siteActivityChange === null ? '' : `${fixed(100 * c.siteActivityChange, 1)} %`, c.withinBand === null ? '' : c.withinBand ? 'yes' : 'no']);
      out.push(fitTable(['site', 'scheme', 'target', 'strength', 'site activity change', band], rows, { width, keyColumns: 2 }));
    }
    if (missed.length > 0) {
      const target = missed[0]!.target;
      const pairs = missed.map((c) => `${site(c.site)} ${c.scheme}`).join(', ');
      out.push(wrap(missed.length === result.calibration.length
        ? `calibration: no site × scheme pair (of ${missed.length}) reached ${target} within the swept strengths`
        : `calibration: ${target} not reached within the swept strengths at ${missed.length} of ${result.calibration.length} site × scheme pairs: ${pairs}`));
    }
  }
  if (result.evaluation && result.evaluation.tables.length > 0) {
    const sources = result.evaluation.tables.map((t) => `${t.table} from ${t.from ?? t.source ?? 'an unrecorded source'}`).join(', ');
    const held = result.evaluation.heldOut === true ? 'held out (gains and detection from different stimuli)' : result.evaluation.heldOut === false ? 'not held out (gains computed on the stimuli detection is measured on)' : 'held out or not: a table does not record its source';
    out.push(wrap(`evaluation: detection on ${result.evaluation.detectionOn}; ${sources}; ${held}`));
  }
  out.push(wrap(result.summary));
  if (options.out !== undefined) out.push(wrap(`results: ${options.out}/cells.arrow, ${options.out}/sweep.json`));
  return `${out.join('\n')}\n`;
}
