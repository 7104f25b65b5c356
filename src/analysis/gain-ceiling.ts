/**
 * The best per-channel gain of a given size, for one detection readout: a reference ("ceiling") that
 * tells how much of what any gain pattern of that size could do a particular scheme achieves.
 *
 * The readout is linearised in the gains at g = 1 (first-order Taylor expansion around the baseline):
 * s_i(g) ≈ y_i + Σ_k J_ik (g_k − 1), with J_ik = ∂s_i/∂g_k measured by central differences. On a
 * network whose readout is linear in the site's channels (e.g. global average pooling followed by a
 * linear layer) this is exact. The expansion is maximised for a smooth version of the ROC area,
 *   A_τ(d) = mean over (signal i, noise j) of σ((s_i − s_j)/τ), σ the logistic function,
 * which tends to the ROC area (Mann–Whitney form) as τ → 0, under the size constraint
 *   Σ_k w_k |d_k| ≤ budget · Σ_k w_k   and   d_k ≥ −1 (gains stay non-negative),
 * with d = g − 1 and w_k the channels' mean baseline activity — the same weighted mean |g − 1| that a
 * sweep reports as a cell's site activity change, so the ceiling and the schemes it is compared with
 * change the site by the same amount. The optimiser is projected gradient ascent with a shrinking
 * step (the projection onto the weighted-ℓ1 ball with the box is a soft threshold found by bisection).
 * It keeps the iterate with the largest exact ROC area of the linearised scores — of the validation
 * stimuli when some are set aside (early stopping), else of all of them.
 */

import { UsageError } from '../errors.js';
import { rocAuc } from '../stats/roc.js';

/** What `fitGainCeiling` maximises over. */
export interface GainCeilingProblem {
  /** Readout score of every stimulus at g = 1 (length n). */
  scores: ArrayLike<number>;
  /** ∂score/∂g_k at g = 1, row-major [n, C]: i*C + k. */
  jacobian: Float64Array;
  /** Channels C at the site. */
  channels: number;
  /** 1 where the stimulus contains the signal, 0 where not. */
  isSignal: Uint8Array;
  /** Non-negative weight of each channel in the size constraint (mean baseline activity). Channels of weight 0 keep gain 1. */
  weights: ArrayLike<number>;
  /** Allowed weighted mean |g − 1|: Σ w|g − 1| ≤ budget·Σ w. */
  budget: number;
  /** Width τ of the logistic step, in score units (default 0.1 × the scores' standard deviation). */
  temperature?: number;
  /**
   * Stimuli (1) kept out of the gradient and used to choose the iterate: early stopping on stimuli the
   * fit does not see. Without it the iterate with the largest ROC area on all stimuli is kept.
   */
  validation?: Uint8Array;
  /** Gradient steps (default 100). */
  iterations?: number;
}

/** The fitted gain and how it scores on the fitting stimuli. */
export interface GainCeilingFit {
  /** g = 1 + d per channel. */
  gain: Float64Array;
  /** ROC area of the linearised scores with this gain (fitting stimuli). */
  linearAuc: number;
  /** ROC area of the scores at g = 1 (fitting stimuli). */
  baseAuc: number;
  /** ROC areas of the validation stimuli at this gain and at g = 1 (NaN without `validation`). */
  validationAuc: number;
  validationBaseAuc: number;
  /** Smooth ROC area A_τ at this gain (training stimuli). */
  smoothAuc: number;
  /** Weighted mean |g − 1| of the result (≤ budget). */
  size: number;
  /** τ used. */
  temperature: number;
}

/**
 * Fits the best gain of the given size for a linearised readout (see the file comment).
 * @returns the gain, its ROC areas and size.
 * @throws UsageError when lengths disagree, the budget is negative or not finite, or a class is empty.
 * Edge cases: budget 0 returns g = 1; non-finite scores or derivatives throw (a broken run must not
 * produce a ceiling); tied scores count one half in the ROC area.
 */
export function fitGainCeiling(problem: GainCeilingProblem): GainCeilingFit {
  const { scores, jacobian, channels: C, isSignal, weights, budget } = problem;
  const n = scores.length;
  if (jacobian.length !== n * C || isSignal.length !== n || weights.length !== C) {
    throw new UsageError('E_CEILING', `gain ceiling: ${n} scores, ${isSignal.length} labels, a ${jacobian.length}-value Jacobian and ${weights.length} weights do not fit ${C} channels`);
  }
  if (!(budget >= 0) || !Number.isFinite(budget)) throw new UsageError('E_CEILING', `gain ceiling: the size budget ${budget} must be a finite number ≥ 0`);
  for (let i = 0; i < n; i++) if (!Number.isFinite(scores[i]!)) throw new UsageError('E_CEILING', `gain ceiling: score ${i} is ${scores[i]}`);
  for (let i = 0; i < jacobian.length; i++) if (!Number.isFinite(jacobian[i]!)) throw new UsageError('E_CEILING', `gain ceiling: derivative ${i} is ${jacobian[i]}`);
  const validation = problem.validation;
  if (validation && validation.length !== n) throw new UsageError('E_CEILING', `gain ceiling: the validation mask has ${validation.length} entries for ${n} stimuli`);
  const signal: number[] = [];
  const noise: number[] = [];
  for (let i = 0; i < n; i++) if (!validation?.[i]) (isSignal[i] ? signal : noise).push(i);
  if (signal.length === 0 || noise.length === 0) throw new UsageError('E_CEILING', `gain ceiling: ${signal.length} signal and ${noise.length} noise stimuli to fit on; both classes are needed`);
  // the validation stimuli as their own score and label arrays
  const held = validation ? Array.from({ length: n }, (_, i) => i).filter((i) => validation[i]) : [];
  const heldSignal = Uint8Array.from(held, (i) => isSignal[i]!);
  const heldScores = new Float64Array(held.length);
  const choose = (values: Float64Array): number => {
    if (!validation) return rocAuc(values, isSignal);
    held.forEach((i, h) => (heldScores[h] = values[i]!));
    return rocAuc(heldScores, heldSignal);
  };
  if (validation && !(heldSignal.includes(1) && heldSignal.includes(0))) throw new UsageError('E_CEILING', 'gain ceiling: the validation stimuli need both classes');
  let mean = 0;
  for (let i = 0; i < n; i++) mean += scores[i]! / n;
  let variance = 0;
  for (let i = 0; i < n; i++) variance += (scores[i]! - mean) ** 2 / Math.max(1, n - 1);
  const tau = problem.temperature ?? (variance > 0 ? 0.1 * Math.sqrt(variance) : 1);
  let weightSum = 0;
  for (let k = 0; k < C; k++) weightSum += Math.max(0, weights[k]!);
  const radius = budget * weightSum;
  const iterations = problem.iterations ?? 100;

  const d = new Float64Array(C);
  const s = new Float64Array(n);
  const omega = new Float64Array(n); // Σ_j ω_ij for signal i, −Σ_i ω_ij for noise j
  const e = new Float64Array(n);
  const grad = new Float64Array(C);
  const linearScores = (dd: Float64Array, out: Float64Array): void => {
    for (let i = 0; i < n; i++) {
      let v = scores[i]!;
      const row = i * C;
      for (let k = 0; k < C; k++) v += jacobian[row + k]! * dd[k]!;
      out[i] = v;
    }
  };
  const baseAuc = rocAuc(scores, isSignal);
  const baseChoice = choose(Float64Array.from(scores as ArrayLike<number>));
  const best = { d: new Float64Array(C), auc: baseChoice, smooth: smoothAuc(Float64Array.from(scores as ArrayLike<number>), signal, noise, tau) };
  if (radius > 0) {
    for (let t = 0; t < iterations; t++) {
      linearScores(d, s);
      omega.fill(0);
      let smooth = 0;
      // σ((s_i − s_j)/τ) = e_i / (e_i + e_j) with e = exp((s − centre)/τ): one exp per stimulus, not per
      // pair; used while the exponents stay far from overflow, else the direct form
      let centre = 0;
      for (let i = 0; i < n; i++) centre += s[i]! / n;
      let largest = 0;
      for (let i = 0; i < n; i++) largest = Math.max(largest, Math.abs((s[i]! - centre) / tau));
      if (largest < 300) {
        for (let i = 0; i < n; i++) e[i] = Math.exp((s[i]! - centre) / tau);
        for (const i of signal) {
          const ei = e[i]!;
          let wi = 0;
          for (const j of noise) {
            const sum = ei + e[j]!;
            const p = ei / sum;
            smooth += p;
            const w = (p * (e[j]! / sum)) / tau;
            wi += w;
            omega[j] -= w;
          }
          omega[i] += wi;
        }
      } else {
        for (const i of signal) {
          for (const j of noise) {
            const p = 1 / (1 + Math.exp(-(s[i]! - s[j]!) / tau));
            smooth += p;
            const w = (p * (1 - p)) / tau;
            omega[i] += w;
            omega[j] -= w;
          }
        }
      }
      smooth /= signal.length * noise.length;
      const auc = choose(s);
      if (auc > best.auc || (auc === best.auc && smooth > best.smooth)) {
        best.d.set(d);
        best.auc = auc;
        best.smooth = smooth;
      }
      grad.fill(0);
      for (let i = 0; i < n; i++) {
        const o = omega[i]!;
        if (o === 0) continue;
        const row = i * C;
        for (let k = 0; k < C; k++) grad[k] += o * jacobian[row + k]!;
      }
      let gradSize = 0;
      for (let k = 0; k < C; k++) gradSize += Math.max(0, weights[k]!) * Math.abs(grad[k]!);
      if (!(gradSize > 0)) break;
      // a step whose weighted ℓ1 size is a shrinking fraction of the budget
      const step = (0.5 * radius) / (1 + t / 10) / gradSize;
      for (let k = 0; k < C; k++) d[k] += step * grad[k]!;
      projectWeightedL1(d, weights, radius);
    }
    linearScores(d, s);
    const auc = choose(s);
    const smooth = smoothAuc(s, signal, noise, tau);
    if (auc > best.auc || (auc === best.auc && smooth > best.smooth)) {
      best.d.set(d);
      best.auc = auc;
      best.smooth = smooth;
    }
  }
  linearScores(best.d, s);
  const linearAuc = rocAuc(s, isSignal);
  const gain = new Float64Array(C);
  let size = 0;
  for (let k = 0; k < C; k++) {
    gain[k] = 1 + best.d[k]!;
    size += Math.max(0, weights[k]!) * Math.abs(best.d[k]!);
  }
  return { gain, linearAuc, baseAuc, validationAuc: validation ? best.auc : Number.NaN, validationBaseAuc: validation ? baseChoice : Number.NaN, smoothAuc: best.smooth, size: weightSum > 0 ? size / weightSum : 0, temperature: tau };
}

/**
 * Projects `d` (in place) onto { Σ w_k|d_k| ≤ radius, d_k ≥ −1 }, channels of weight ≤ 0 set to 0:
 * d_k = max(−1, sign(v_k)·max(0, |v_k| − λw_k)) with the smallest λ ≥ 0 that meets the ball
 * (the weighted soft threshold; the size is non-increasing in λ, so bisection finds it).
 */
export function projectWeightedL1(d: Float64Array, weights: ArrayLike<number>, radius: number): void {
  const C = d.length;
  const size = (lambda: number): number => {
    let total = 0;
    for (let k = 0; k < C; k++) {
      const w = weights[k]!;
      if (!(w > 0)) continue;
      const v = d[k]!;
      total += w * Math.abs(shrink(v, lambda * w));
    }
    return total;
  };
  let lambda = 0;
  if (size(0) > radius) {
    let high = 0;
    for (let k = 0; k < C; k++) if (weights[k]! > 0) high = Math.max(high, Math.abs(d[k]!) / weights[k]!);
    let low = 0;
    for (let it = 0; it < 100; it++) {
      const mid = (low + high) / 2;
      if (size(mid) > radius) low = mid;
      else high = mid;
    }
    lambda = high;
  }
  for (let k = 0; k < C; k++) {
    const w = weights[k]!;
    const v = d[k]!;
    d[k] = w > 0 ? shrink(v, lambda * w) : 0;
  }
}

/** sign(v)·max(0, |v| − t), clipped at −1 (a zero is +0). */
function shrink(v: number, t: number): number {
  const magnitude = Math.abs(v) - t;
  return magnitude > 0 ? Math.max(-1, Math.sign(v) * magnitude) : 0;
}

function smoothAuc(s: Float64Array, signal: readonly number[], noise: readonly number[], tau: number): number {
  let total = 0;
  for (const i of signal) for (const j of noise) total += 1 / (1 + Math.exp(-(s[i]! - s[j]!) / tau));
  return total / (signal.length * noise.length);
}
