/**
 * Log-sum-exp: the score of a group of readout units, and the per-stimulus group scores of a readout.
 *
 *   LSE(y_G) = log Σ_{u∈G} exp(y_u) = m + log Σ_{u∈G} exp(y_u − m),   m = max_{u∈G} y_u
 *
 * Subtracting the group's maximum first keeps every exponent ≤ 0, so nothing overflows and at least one
 * term is exactly 1 (the usual stable form; e.g. Blanchard, Higham & Higham, "Accurately computing the
 * log-sum-exp and softmax functions", IMA J. Numer. Anal. 41 (2021), from memory). With softmax
 * p_u = exp(y_u) / Σ_all exp(y_v) over the whole readout, LSE(y_G) − LSE(y_all) = log Σ_{u∈G} p_u: a
 * group's score is the log of its summed softmax probability up to a normaliser shared by every group.
 * A one-unit group's score is that unit's value exactly (m + log 1).
 */

/**
 * LSE over `values[offset + units[j]]`, accumulated in doubles.
 * @param values the row-major readout (any numeric array).
 * @param offset where the row starts.
 * @param units unit indices of the group (non-empty).
 * @returns the score; NaN when a value is NaN, +Infinity when one is +Infinity, −Infinity when all are
 *   −Infinity (and for an empty group: the log of an empty sum).
 * @throws never.
 */
export function logSumExp(values: ArrayLike<number>, offset: number, units: ArrayLike<number>): number {
  const n = units.length;
  if (n === 0) return Number.NEGATIVE_INFINITY;
  if (n === 1) return Number(values[offset + units[0]!]!);
  let m = Number.NEGATIVE_INFINITY;
  for (let j = 0; j < n; j++) {
    const v = values[offset + units[j]!]!;
    if (Number.isNaN(v)) return Number.NaN;
    if (v > m) m = v;
  }
  if (m === Number.NEGATIVE_INFINITY || m === Number.POSITIVE_INFINITY) return m;
  let sum = 0;
  for (let j = 0; j < n; j++) sum += Math.exp(values[offset + units[j]!]! - m);
  return m + Math.log(sum);
}

/**
 * Group scores of every row of a readout: out[i·G + g] = LSE of row i over `groups[g]`.
 * @param readout [rows, units] row-major: i·units + u.
 * @param rows number of rows.
 * @param units width of a row.
 * @param groups unit indices of each group (each non-empty, indices in [0, units)).
 * @returns [rows, G] in doubles.
 * @throws RangeError when the readout is shorter than rows × units.
 */
export function groupScores(readout: ArrayLike<number>, rows: number, units: number, groups: ReadonlyArray<ArrayLike<number>>): Float64Array {
  if (readout.length < rows * units) throw new RangeError(`readout has ${readout.length} values, expected ${rows} × ${units}`);
  const G = groups.length;
  const out = new Float64Array(rows * G);
  for (let i = 0; i < rows; i++) {
    const offset = i * units; // [rows, units]: i*units + u
    for (let g = 0; g < G; g++) out[i * G + g] = logSumExp(readout, offset, groups[g]!);
  }
  return out;
}

/**
 * One group's score column: out[i] = LSE of row i over `units`.
 * @param readout [rows, width] row-major.
 * @returns [rows] in doubles.
 * @throws never (rows beyond the readout's length read as undefined → NaN).
 */
export function groupColumn(readout: ArrayLike<number>, rows: number, width: number, units: ArrayLike<number>): Float64Array {
  const out = new Float64Array(rows);
  for (let i = 0; i < rows; i++) out[i] = logSumExp(readout, i * width, units);
  return out;
}
