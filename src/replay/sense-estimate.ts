/**
 * From readout sums to sensitivities: the central secant, its Richardson extrapolation, the curvature
 * indicator fd_error and the warning when a value depends on the step (formulas in sense.ts's comment).
 */
import { RuntimeFailure } from '../errors.js';
import type { SensitivitySums, SiteSensitivity } from './sense-types.js';

/**
 * Sensitivities and their step indicators from readout sums (the formulas of the file comment). With 2
 * variants (secant): D(h) = (ȳ(+h) − ȳ(−h)) / 2h. With 4 (Richardson): (4·D(h/2) − D(h)) / 3 and
 * extrapolationShift |D(h/2) − D(h)| / 3. Both: fd_error |D₊ − D₋| / 2 at h (curvature within ±h).
 * @param sums readout sums and counts (from one run, or added up over shards); `variants` picks the method.
 * @param C channels; K categories; step h.
 * @returns [C, K] arrays (k*K + c), extrapolationShift null for 2 variants; a category with count 0 gives NaN.
 * @throws RuntimeFailure when `variants` is neither 2 nor 4.
 */
export function sensitivityFromSums(sums: SensitivitySums, C: number, K: number, step: number): { sensitivity: Float64Array; fdError: Float64Array; extrapolationShift: Float64Array | null } {
  const { variants, perturbed: sumPerturbed, identity: sumIdentity, counts } = sums;
  if (variants === 1) {
    // exact: the sums are of gradients already; their means are the sensitivities
    const sensitivity = new Float64Array(C * K);
    for (let k = 0; k < C; k++) for (let c = 0; c < K; c++) sensitivity[k * K + c] = sumPerturbed[k * K + c]! / counts[c]!;
    return { sensitivity, fdError: new Float64Array(C * K), extrapolationShift: null };
  }
  if (variants !== 2 && variants !== 4) throw new RuntimeFailure('E_SENSE_SUMS', `sensitivity sums have ${variants} step variants; expected 1 (exact), 2 (secant) or 4 (Richardson)`);
  const sensitivity = new Float64Array(C * K);
  const fdError = new Float64Array(C * K);
  const extrapolationShift = variants === 4 ? new Float64Array(C * K) : null;
  for (let k = 0; k < C; k++) {
    for (let c = 0; c < K; c++) {
      const n = counts[c]!;
      const plus = sumPerturbed[(0 * C + k) * K + c]! / n;
      const minus = sumPerturbed[(1 * C + k) * K + c]! / n;
      const zero = sumIdentity[c]! / n;
      const central = (plus - minus) / (2 * step);
      const forward = (plus - zero) / step;
      const backward = (zero - minus) / step;
      fdError[k * K + c] = Math.abs(forward - backward) / 2;
      if (extrapolationShift) {
        const halfPlus = sumPerturbed[(2 * C + k) * K + c]! / n;
        const halfMinus = sumPerturbed[(3 * C + k) * K + c]! / n;
        const half = (halfPlus - halfMinus) / step; // (y(+h/2) − y(−h/2)) / (2 · h/2)
        sensitivity[k * K + c] = (4 * half - central) / 3;
        extrapolationShift[k * K + c] = Math.abs(half - central) / 3;
      } else {
        sensitivity[k * K + c] = central;
      }
    }
  }
  return { sensitivity, fdError, extrapolationShift };
}

/**
 * Finds the worst step indicator relative to its category's largest |sensitivity| and words a warning
 * (exported for merged shards): extrapolationShift for Richardson blocks, fd_error for secant blocks.
 * @param block a measured block; ratio the warning threshold (fraction of the category maximum).
 * @returns the worst ratio (NaN counts as infinite) and the warning line when some value exceeds `ratio`.
 */
export function errorCheck(block: SiteSensitivity, ratio: number): { worst: number; warning?: string } {
  if (block.method === 'exact') return { worst: 0 }; // no step: nothing depends on one
  const { channels: C, categories } = block;
  const K = categories.length;
  const indicator = block.extrapolationShift ?? block.fdError;
  let worst = 0;
  let worstAt = -1;
  let over = 0;
  for (let c = 0; c < K; c++) {
    let largest = 0;
    for (let k = 0; k < C; k++) largest = Math.max(largest, Math.abs(block.sensitivity[k * K + c]!));
    for (let k = 0; k < C; k++) {
      const e = indicator[k * K + c]!;
      const relative = largest > 0 ? e / largest : e > 0 ? Number.POSITIVE_INFINITY : 0;
      if (!(relative <= ratio)) over++;
      if (!(relative <= worst)) {
        worst = relative;
        worstAt = k * K + c;
      }
    }
  }
  if (over === 0) return { worst };
  const k = Math.floor(worstAt / K);
  const c = worstAt % K;
  const pct = (x: number) => `${(100 * x).toPrecision(2)}%`;
  const where = `for ${over} of ${C * K} values (worst ${Number.isFinite(worst) ? pct(worst) : 'NaN'} at channel ${k}, category "${categories[c]}")`;
  const warning = block.extrapolationShift
    ? `site "${block.layer}": the secants at steps ${block.step} and ${block.step / 2} differ by more than ${pct(3 * ratio)} of the category's largest |sensitivity| ${where}; the value depends on the step (ReLU kinks within ±${block.step}); compare a smaller --step`
    : `site "${block.layer}": fd_error (curvature within ±${block.step}) exceeds ${pct(ratio)} of the category's largest |sensitivity| ${where}; the secant is the mean slope over the step (curvature or ReLU kinks); compare a smaller --step or the default --method richardson`;
  return { worst, warning };
}
