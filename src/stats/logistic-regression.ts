/**
 * L2-regularised binary logistic regression, fitted by truncated Newton (Newton–CG), with
 * standardisation, class balancing and stratified seeded k-fold cross-validation of the regularisation.
 *
 * Objective (the one scikit-learn's `LogisticRegression(penalty="l2", C)` minimises; the intercept is
 * not penalised):
 *   f(w, b) = ½‖w‖² + C · Σ_i s_i · log(1 + exp(−t_i (x_i·w + b))),  t_i = ±1, s_i sample weights.
 * Newton–CG: each step solves H p = −∇f by conjugate gradients using Hessian–vector products
 * (H v = v_w + C·Xᵀ D (X v_w + v_b), D = s_i p_i (1 − p_i)), so it needs O(n·d) memory and time per CG
 * iteration, never the d × d Hessian — feature vectors of 2048 channels stay cheap — and converges
 * quadratically near the optimum, which a fixed-step or quasi-Newton loop does not. Hand-written rather
 * than a registry optimiser: the loop is ~60 lines, exact to the tolerance asked, and needs only typed
 * arrays (the npm optimisers checked either run plain gradient descent or work on nested JS arrays).
 *
 * Layout: features are row-major [n, d]: x[i*d + j].
 */
import { createRandom } from '../random.js';

/** Options of `fitLogistic`. */
export interface LogisticFitOptions {
  /** Inverse regularisation strength C > 0 (larger: weaker penalty). */
  C: number;
  /** Per-sample weights s_i (default 1). */
  sampleWeight?: Float64Array;
  /** Start from these weights and intercept (warm start along a C path). */
  initial?: { weights: Float64Array; intercept: number };
  /** Stop when max |∂f| ≤ tolerance · max(1, max |∂f at the start|) (default 1e-10). */
  tolerance?: number;
  /** Newton steps at most (default 100). */
  maxIterations?: number;
}

/** Conjugate-gradient steps per Newton step at most (the outer loop goes on from wherever CG stopped). */
const MAX_CG_STEPS = 200;

/** A fitted binary logistic model: P(y = 1 | x) = σ(x·w + b). */
export interface LogisticModel {
  weights: Float64Array;
  intercept: number;
  /** Newton steps taken. */
  iterations: number;
  /** The gradient reached the tolerance. */
  converged: boolean;
}

/** log(1 + exp(−m)) without overflow. */
function softplusNeg(m: number): number {
  return m > 0 ? Math.log1p(Math.exp(-m)) : -m + Math.log1p(Math.exp(m));
}

/** σ(z) without overflow. */
export function sigmoid(z: number): number {
  if (z >= 0) return 1 / (1 + Math.exp(-z));
  const e = Math.exp(z);
  return e / (1 + e);
}

/**
 * Fits the model (see the file comment).
 * @param x features [n, d] row-major; y labels 0/1 (length n).
 * @returns weights, intercept and convergence.
 * @throws RangeError when C is not a positive finite number, the sizes disagree, or y holds one class only.
 */
export function fitLogistic(x: Float64Array, n: number, d: number, y: Uint8Array, options: LogisticFitOptions): LogisticModel {
  const C = options.C;
  if (!(C > 0) || !Number.isFinite(C)) throw new RangeError(`C must be a positive number, got ${C}`);
  if (x.length !== n * d || y.length !== n) throw new RangeError(`features hold ${x.length} values and labels ${y.length} for n=${n}, d=${d}`);
  let positives = 0;
  for (let i = 0; i < n; i++) positives += y[i] ? 1 : 0;
  if (positives === 0 || positives === n) throw new RangeError('logistic regression needs both classes among the labels');
  const s = options.sampleWeight ?? new Float64Array(n).fill(1);
  const w = options.initial ? Float64Array.from(options.initial.weights) : new Float64Array(d);
  let b = options.initial ? options.initial.intercept : 0;
  const z = new Float64Array(n);
  const p = new Float64Array(n);
  const gw = new Float64Array(d);
  const dz = new Float64Array(n);
  // CG work vectors (the last entry of each is the intercept)
  const r = new Float64Array(d + 1);
  const q = new Float64Array(d + 1);
  const hq = new Float64Array(d + 1);
  const step = new Float64Array(d + 1);
  const trial = new Float64Array(d);

  const margins = (weights: Float64Array, intercept: number, out: Float64Array): void => {
    for (let i = 0; i < n; i++) {
      let acc = intercept;
      const row = i * d;
      for (let j = 0; j < d; j++) acc += x[row + j]! * weights[j]!;
      out[i] = acc;
    }
  };
  const objective = (weights: Float64Array, zs: Float64Array): number => {
    let reg = 0;
    for (let j = 0; j < d; j++) reg += weights[j]! * weights[j]!;
    let loss = 0;
    for (let i = 0; i < n; i++) loss += s[i]! * softplusNeg(y[i] ? zs[i]! : -zs[i]!);
    return 0.5 * reg + C * loss;
  };
  /** ∇f into gw and returns ∂f/∂b; also fills p. */
  const gradient = (): number => {
    gw.set(w);
    let gb = 0;
    for (let i = 0; i < n; i++) {
      p[i] = sigmoid(z[i]!);
      const e = C * s[i]! * (p[i]! - (y[i] ? 1 : 0));
      gb += e;
      const row = i * d;
      for (let j = 0; j < d; j++) gw[j] += e * x[row + j]!;
    }
    return gb;
  };
  /** H v into out (v, out of length d + 1). */
  const hessianTimes = (v: Float64Array, out: Float64Array): void => {
    for (let i = 0; i < n; i++) {
      let acc = v[d]!;
      const row = i * d;
      for (let j = 0; j < d; j++) acc += x[row + j]! * v[j]!;
      dz[i] = C * s[i]! * p[i]! * (1 - p[i]!) * acc;
    }
    let ob = 0;
    for (let j = 0; j < d; j++) out[j] = v[j]!;
    for (let i = 0; i < n; i++) {
      const e = dz[i]!;
      ob += e;
      const row = i * d;
      for (let j = 0; j < d; j++) out[j] += e * x[row + j]!;
    }
    out[d] = ob;
  };

  margins(w, b, z);
  let f = objective(w, z);
  let gb = gradient();
  const maxAbs = (): number => {
    let m = Math.abs(gb);
    for (let j = 0; j < d; j++) m = Math.max(m, Math.abs(gw[j]!));
    return m;
  };
  const scale = Math.max(1, maxAbs());
  const tolerance = (options.tolerance ?? 1e-10) * scale;
  const maxIterations = options.maxIterations ?? 100;
  let iterations = 0;
  let converged = maxAbs() <= tolerance;
  while (!converged && iterations < maxIterations) {
    iterations++;
    // conjugate gradients on H step = −g, to a relative residual of min(0.5, √‖g‖) (Nocedal & Wright, Algorithm 7.1)
    let gNorm = gb * gb;
    for (let j = 0; j < d; j++) gNorm += gw[j]! * gw[j]!;
    gNorm = Math.sqrt(gNorm);
    const forcing = Math.min(0.5, Math.sqrt(gNorm)) * gNorm;
    step.fill(0);
    for (let j = 0; j < d; j++) r[j] = -gw[j]!;
    r[d] = -gb;
    q.set(r);
    let rr = 0;
    for (let j = 0; j <= d; j++) rr += r[j]! * r[j]!;
    for (let k = 0; k < Math.min(2 * (d + 1), MAX_CG_STEPS) && Math.sqrt(rr) > forcing; k++) {
      hessianTimes(q, hq);
      let qhq = 0;
      for (let j = 0; j <= d; j++) qhq += q[j]! * hq[j]!;
      if (!(qhq > 0)) break;
      const alpha = rr / qhq;
      for (let j = 0; j <= d; j++) {
        step[j] += alpha * q[j]!;
        r[j] -= alpha * hq[j]!;
      }
      let next = 0;
      for (let j = 0; j <= d; j++) next += r[j]! * r[j]!;
      const beta = next / rr;
      rr = next;
      for (let j = 0; j <= d; j++) q[j] = r[j]! + beta * q[j]!;
    }
    let slope = step[d]! * gb;
    for (let j = 0; j < d; j++) slope += step[j]! * gw[j]!;
    if (!(slope < 0)) {
      // not a descent direction (CG stopped at once): fall back to steepest descent
      for (let j = 0; j < d; j++) step[j] = -gw[j]!;
      step[d] = -gb;
      slope = -gNorm * gNorm;
    }
    // Armijo backtracking from the full Newton step
    let t = 1;
    let accepted = false;
    for (let k = 0; k < 60; k++) {
      for (let j = 0; j < d; j++) trial[j] = w[j]! + t * step[j]!;
      margins(trial, b + t * step[d]!, dz);
      const ft = objective(trial, dz);
      if (ft <= f + 1e-4 * t * slope) {
        w.set(trial);
        b += t * step[d]!;
        z.set(dz);
        f = ft;
        accepted = true;
        break;
      }
      t /= 2;
    }
    gb = gradient();
    converged = maxAbs() <= tolerance;
    if (!accepted) break;
  }
  return { weights: w, intercept: b, iterations, converged };
}

/** Logits x·w + b of every row of x [n, d]. */
export function predictLogits(x: Float64Array, n: number, d: number, model: Pick<LogisticModel, 'weights' | 'intercept'>): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let acc = model.intercept;
    const row = i * d;
    for (let j = 0; j < d; j++) acc += x[row + j]! * model.weights[j]!;
    out[i] = acc;
  }
  return out;
}

/** Per-feature mean and scale of x [n, d] (population sd; 1 where the sd is 0, as scikit-learn's StandardScaler does), over the rows `rows` (default all). */
export function featureScaling(x: Float64Array, n: number, d: number, rows?: Int32Array): { mean: Float64Array; scale: Float64Array; constant: number } {
  const mean = new Float64Array(d);
  const m2 = new Float64Array(d);
  const count = rows ? rows.length : n;
  // Welford per feature, rows in order
  for (let r = 0; r < count; r++) {
    const row = (rows ? rows[r]! : r) * d;
    for (let j = 0; j < d; j++) {
      const v = x[row + j]!;
      const delta = v - mean[j]!;
      mean[j] += delta / (r + 1);
      m2[j] += delta * (v - mean[j]!);
    }
  }
  const scale = new Float64Array(d);
  let constant = 0;
  for (let j = 0; j < d; j++) {
    const sd = Math.sqrt(m2[j]! / count);
    // a spread below float64 rounding of the mean counts as none
    if (sd <= 1e-12 * Math.max(1, Math.abs(mean[j]!))) {
      scale[j] = 1;
      constant++;
    } else scale[j] = sd;
  }
  return { mean, scale, constant };
}

/** (x − mean) / scale of the rows `rows` of x [n, d], as a new [rows.length, d] array. */
export function standardiseRows(x: Float64Array, d: number, rows: Int32Array, scaling: { mean: Float64Array; scale: Float64Array }): Float64Array {
  const out = new Float64Array(rows.length * d);
  for (let r = 0; r < rows.length; r++) {
    const from = rows[r]! * d;
    const to = r * d;
    for (let j = 0; j < d; j++) out[to + j] = (x[from + j]! - scaling.mean[j]!) / scaling.scale[j]!;
  }
  return out;
}

/** Sample weights n / (2·n_class) (scikit-learn's class_weight="balanced" for two classes). */
export function balancedWeights(y: Uint8Array): Float64Array {
  let positives = 0;
  for (let i = 0; i < y.length; i++) positives += y[i] ? 1 : 0;
  const negatives = y.length - positives;
  const out = new Float64Array(y.length);
  for (let i = 0; i < y.length; i++) out[i] = y.length / (2 * (y[i] ? positives : negatives));
  return out;
}

/**
 * Stratified fold of every sample: the positives, and separately the negatives, are shuffled with the
 * seeded generator and dealt to folds 0..k−1 in turn, so each fold holds ⌊n_c/k⌋ or ⌈n_c/k⌉ of each class.
 * @throws RangeError when a class has fewer than k samples.
 */
export function stratifiedFolds(y: Uint8Array, k: number, seed: number | string): Int32Array {
  const folds = new Int32Array(y.length);
  const rng = createRandom(seed);
  for (const cls of [1, 0]) {
    const members: number[] = [];
    for (let i = 0; i < y.length; i++) if ((y[i] ? 1 : 0) === cls) members.push(i);
    if (members.length < k) throw new RangeError(`${members.length} ${cls ? 'positive' : 'negative'} samples for ${k} folds`);
    const order = rng.fork(`class ${cls}`);
    for (let i = members.length - 1; i > 0; i--) {
      const j = Math.floor(order.uniform() * (i + 1));
      [members[i], members[j]] = [members[j]!, members[i]!];
    }
    members.forEach((sample, r) => (folds[sample] = r % k));
  }
  return folds;
}

/** Mean log-loss −[y log p + (1 − y) log(1 − p)] of logits z against labels y. */
export function meanLogLoss(z: Float64Array, y: Uint8Array): number {
  let total = 0;
  for (let i = 0; i < z.length; i++) total += softplusNeg(y[i] ? z[i]! : -z[i]!);
  return total / z.length;
}

/** Options of `crossValidateLogistic`. */
export interface LogisticCvOptions {
  /** Candidate C values, in the order ties are broken (the first best wins). */
  Cs: readonly number[];
  /** Fold of every sample (0..k−1), e.g. from `stratifiedFolds`. */
  folds: Int32Array;
  /** Weight classes by n / (2·n_class) in the fits (scores are unweighted). */
  balanced?: boolean;
}

/** Cross-validation of C and the model refitted at the chosen C on all samples. */
export interface LogisticCvResult {
  /** Mean over folds of the validation log-loss, per candidate C. */
  losses: number[];
  /** The chosen C (lowest mean validation log-loss; the first in `Cs` on a tie). */
  C: number;
  /** Validation logits of every sample from the fold that left it out, at the chosen C. */
  validationLogits: Float64Array;
  /** Standardisation of all samples (the refit's). */
  scaling: { mean: Float64Array; scale: Float64Array; constant: number };
  /** The refit on all samples, in standardised features. */
  model: LogisticModel;
}

/**
 * Chooses C by k-fold cross-validation — each fold standardised with the statistics of its training
 * part, scored by validation log-loss, averaged over folds — then refits on all samples at that C (what
 * scikit-learn's GridSearchCV over a StandardScaler → LogisticRegression pipeline with
 * scoring="neg_log_loss" does).
 * @param x features [n, d] row-major (raw, not standardised); y labels 0/1.
 * @throws RangeError when a training part holds one class only or C values are not positive.
 */
export function crossValidateLogistic(x: Float64Array, n: number, d: number, y: Uint8Array, options: LogisticCvOptions): LogisticCvResult {
  const k = Math.max(...options.folds) + 1;
  const losses = options.Cs.map(() => 0);
  const validation = options.Cs.map(() => new Float64Array(n));
  for (let fold = 0; fold < k; fold++) {
    const train: number[] = [];
    const test: number[] = [];
    for (let i = 0; i < n; i++) (options.folds[i] === fold ? test : train).push(i);
    const trainRows = Int32Array.from(train);
    const testRows = Int32Array.from(test);
    const scaling = featureScaling(x, n, d, trainRows);
    const xt = standardiseRows(x, d, trainRows, scaling);
    const xv = standardiseRows(x, d, testRows, scaling);
    const yt = Uint8Array.from(train, (i) => y[i]!);
    const yv = Uint8Array.from(test, (i) => y[i]!);
    const weights = options.balanced ? balancedWeights(yt) : undefined;
    let previous: LogisticModel | undefined;
    // warm start along the path, from the strongest penalty up
    const order = options.Cs.map((C, c) => ({ C, c })).sort((a, b) => a.C - b.C);
    for (const { C, c } of order) {
      previous = fitLogistic(xt, train.length, d, yt, { C, tolerance: 1e-8, ...(weights ? { sampleWeight: weights } : {}), ...(previous ? { initial: previous } : {}) });
      const z = predictLogits(xv, test.length, d, previous);
      losses[c] += meanLogLoss(z, yv) / k;
      test.forEach((i, r) => (validation[c]![i] = z[r]!));
    }
  }
  let best = 0;
  for (let c = 1; c < losses.length; c++) if (losses[c]! < losses[best]!) best = c;
  const all = Int32Array.from({ length: n }, (_, i) => i);
  const scaling = featureScaling(x, n, d, all);
  const xs = standardiseRows(x, d, all, scaling);
  const model = fitLogistic(xs, n, d, y, { C: options.Cs[best]!, ...(options.balanced ? { sampleWeight: balancedWeights(y) } : {}) });
  return { losses, C: options.Cs[best]!, validationLogits: validation[best]!, scaling, model };
}
