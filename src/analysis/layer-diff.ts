/**
 * Streaming comparison of one layer's activations between a baseline and a modulated run, fed batch
 * by batch (memory stays bounded by the per-stimulus summaries, never the activations).
 *
 * Layout of a batch: each row is one stimulus of E = C·S elements, channel-major:
 * channel k of stimulus n occupies [n*E + k*S, n*E + (k+1)*S) (C×H×W row-major, S = H·W; S = 1 for a
 * vector or for channel-means-only input).
 *
 * Accumulation is in doubles: per channel and stimulus plain sums over S elements, combined into the
 * pooled totals with compensated (Neumaier) summation; the pooled Pearson moments and the per-channel
 * across-stimulus moments are combined with the exact pairwise update of Chan, Golub & LeVeque (1979,
 * "Updating formulae and a pairwise algorithm for computing sample variances"), which also makes
 * `merge` of disjoint stimulus sets exact up to rounding. The metrics computed from the accumulated
 * moments are in layer-diff-metrics.ts. The accumulator is one class (past ~500 lines) because its
 * single pass, its exact `merge` and its state export must change together.
 */

import { UsageError } from '../errors.js';
import { layerDiffMetrics, relativeNorm, type LayerDiffMetrics } from './layer-diff-metrics.js';

/** Shape and options of one layer's accumulator. */
export interface LayerDiffOptions {
  /** E, elements per stimulus (must equal channels × spatial). */
  elements: number;
  /** C, channels (feature maps, or vector entries when spatial = 1). */
  channels: number;
  /** S, elements per channel: H·W, or 1 for a vector or channel-means-only input. */
  spatial: number;
  /** A channel counts as up / down when its activity ratio is beyond 1 ± tolerance; default 0.01. */
  tolerance?: number;
  /** Layer name, used in error messages only. */
  layer?: string;
  /** Expected number of stimuli, to size the per-stimulus buffers once (they grow if exceeded). */
  expectedStimuli?: number;
  /**
   * Keep the per-stimulus channel means of both sides for `channelMeans()` (default true). They take
   * N·C·8 bytes, which for a wide vector layer (spatial = 1) is as much as the activations themselves;
   * pass false for layers that need no signature to keep memory bounded.
   */
  keepChannelMeans?: boolean;
}

/** Per-stimulus channel means of both sides, [N, C] row-major (views into the accumulator). */
export interface ChannelMeans {
  /** N. */
  stimuli: number;
  /** C. */
  channels: number;
  /** Baseline a_nk at n*C + k. */
  base: Float32Array;
  /** Modulated b_nk at n*C + k. */
  mod: Float32Array;
}

/** Everything a `LayerDiffAccumulator` holds (see `exportState`); arrays over stimuli have length N. */
export interface LayerDiffState {
  elements: number;
  channels: number;
  spatial: number;
  tolerance: number;
  layer: string;
  keepChannelMeans: boolean;
  /** N. */
  stimuli: number;
  /** Compensated pooled sums Σa², Σb², Σab, Σ(b−a)², each as value and compensation. [8]. */
  pooled: Float64Array;
  /** Pooled Pearson moments: count, mean a, mean b, M2 a, M2 b, co-moment. [6]. */
  pearson: Float64Array;
  /** Per channel across stimuli: mean and M2 of a_nk, mean of b_nk. [C] each. */
  channelMeanA: Float64Array;
  channelM2A: Float64Array;
  channelMeanB: Float64Array;
  nonFiniteBase: number;
  nonFiniteMod: number;
  zeroNormStimuli: number;
  /** Per stimulus: relative change, Σ(b−a)², Σa². [N] each. */
  stimulusChange: Float64Array;
  stimulusDiffSquared: Float64Array;
  stimulusBaseSquared: Float64Array;
  /** Per-stimulus channel means [N, C], or null without keepChannelMeans. */
  meansA: Float32Array | null;
  meansB: Float32Array | null;
}

// Indices into the compensated pooled sums: value at 2*i, Neumaier compensation at 2*i + 1.
const AA = 0;
const BB = 1;
const AB = 2;
const DD = 3;

/**
 * Accumulates the diff of one layer over batches of stimuli; `finish()` gives the metrics at any time.
 *
 * NaN/Inf policy: non-finite elements are counted per side and are not skipped, so every metric they
 * touch comes out NaN (pooled norms, cosine, Pearson, the affected channels' ratios and effect sizes, and
 * the statistics over channels that include them).
 */
export class LayerDiffAccumulator {
  /** E. */
  readonly elements: number;
  /** C. */
  readonly channels: number;
  /** S. */
  readonly spatial: number;
  /** Ratio tolerance. */
  readonly tolerance: number;
  /** Layer name for messages ("layer" when not given). */
  readonly layer: string;
  /** Whether per-stimulus channel means are kept. */
  readonly keepChannelMeans: boolean;

  private stimuli = 0;
  private readonly pooled = new Float64Array(8);
  // Pooled Pearson moments over all elements: count, means, centred sums of squares and co-moment.
  private pearsonCount = 0;
  private pearsonMeanA = 0;
  private pearsonMeanB = 0;
  private pearsonM2A = 0;
  private pearsonM2B = 0;
  private pearsonCoMoment = 0;
  // Per channel across stimuli: Welford mean and M2 of a_nk, running mean of b_nk.
  private readonly channelMeanA: Float64Array;
  private readonly channelM2A: Float64Array;
  private readonly channelMeanB: Float64Array;
  private nonFiniteBase = 0;
  private nonFiniteMod = 0;
  private zeroNormStimuli = 0;
  // Per-stimulus vectors, grown by doubling.
  private capacity: number;
  private stimulusChange: Float64Array;
  private stimulusDiffSquared: Float64Array;
  private stimulusBaseSquared: Float64Array;
  private meansA: Float32Array;
  private meansB: Float32Array;

  /**
   * @param options elements, channels, spatial, tolerance (default 0.01), layer name, expectedStimuli,
   *   keepChannelMeans (default true).
   * @throws UsageError when a size is not a positive integer, elements ≠ channels × spatial, or the
   *   tolerance is negative or not finite.
   */
  constructor(options: LayerDiffOptions) {
    const { elements, channels, spatial } = options;
    this.layer = options.layer ?? 'layer';
    this.keepChannelMeans = options.keepChannelMeans ?? true;
    this.tolerance = options.tolerance ?? 0.01;
    for (const [name, value] of [
      ['elements', elements],
      ['channels', channels],
      ['spatial', spatial],
    ] as const) {
      if (!Number.isInteger(value) || value < 1) {
        throw new UsageError('E_DIFF_SHAPE', `${this.layer}: ${name} = ${String(value)} is not a positive integer`);
      }
    }
    if (elements !== channels * spatial) {
      throw new UsageError(
        'E_DIFF_SHAPE',
        `${this.layer}: elements = ${elements} but channels × spatial = ${channels} × ${spatial} = ${channels * spatial}`,
        { hint: 'spatial is H·W for a C×H×W tensor, 1 for a vector' },
      );
    }
    if (!(this.tolerance >= 0) || !Number.isFinite(this.tolerance)) {
      throw new UsageError('E_DIFF_OPTION', `${this.layer}: tolerance = ${String(this.tolerance)} is not a finite number ≥ 0`, {
        hint: 'use e.g. 0.01 for ±1%',
      });
    }
    this.elements = elements;
    this.channels = channels;
    this.spatial = spatial;
    this.channelMeanA = new Float64Array(channels);
    this.channelM2A = new Float64Array(channels);
    this.channelMeanB = new Float64Array(channels);
    const expected = options.expectedStimuli;
    this.capacity = expected !== undefined && Number.isInteger(expected) && expected > 0 ? expected : 64;
    this.stimulusChange = new Float64Array(this.capacity);
    this.stimulusDiffSquared = new Float64Array(this.capacity);
    this.stimulusBaseSquared = new Float64Array(this.capacity);
    this.meansA = new Float32Array(this.keepChannelMeans ? this.capacity * channels : channels);
    this.meansB = new Float32Array(this.keepChannelMeans ? this.capacity * channels : channels);
  }

  /** Stimuli accumulated so far. */
  get count(): number {
    return this.stimuli;
  }

  /**
   * The complete internal state (copies), e.g. to store a shard's partial statistics and `merge` them
   * elsewhere; `fromState` is its inverse: `fromState(a.exportState())` accumulates and finishes exactly
   * like `a`.
   * @returns plain numbers and typed arrays trimmed to the stimuli seen.
   */
  exportState(): LayerDiffState {
    const N = this.stimuli;
    const C = this.channels;
    return {
      elements: this.elements,
      channels: C,
      spatial: this.spatial,
      tolerance: this.tolerance,
      layer: this.layer,
      keepChannelMeans: this.keepChannelMeans,
      stimuli: N,
      pooled: this.pooled.slice(),
      pearson: Float64Array.of(this.pearsonCount, this.pearsonMeanA, this.pearsonMeanB, this.pearsonM2A, this.pearsonM2B, this.pearsonCoMoment),
      channelMeanA: this.channelMeanA.slice(),
      channelM2A: this.channelM2A.slice(),
      channelMeanB: this.channelMeanB.slice(),
      nonFiniteBase: this.nonFiniteBase,
      nonFiniteMod: this.nonFiniteMod,
      zeroNormStimuli: this.zeroNormStimuli,
      stimulusChange: this.stimulusChange.slice(0, N),
      stimulusDiffSquared: this.stimulusDiffSquared.slice(0, N),
      stimulusBaseSquared: this.stimulusBaseSquared.slice(0, N),
      meansA: this.keepChannelMeans ? this.meansA.slice(0, N * C) : null,
      meansB: this.keepChannelMeans ? this.meansB.slice(0, N * C) : null,
    };
  }

  /**
   * Rebuilds an accumulator from `exportState()`.
   * @throws UsageError when the state's sizes are inconsistent (wrong array lengths, bad shape).
   */
  static fromState(state: LayerDiffState): LayerDiffAccumulator {
    const N = state.stimuli;
    const C = state.channels;
    const accumulator = new LayerDiffAccumulator({ elements: state.elements, channels: C, spatial: state.spatial, tolerance: state.tolerance, layer: state.layer, keepChannelMeans: state.keepChannelMeans, expectedStimuli: Math.max(N, 1) });
    const lengths: Array<[string, number, number]> = [
      ['pooled', state.pooled.length, 8],
      ['pearson', state.pearson.length, 6],
      ['channelMeanA', state.channelMeanA.length, C],
      ['channelM2A', state.channelM2A.length, C],
      ['channelMeanB', state.channelMeanB.length, C],
      ['stimulusChange', state.stimulusChange.length, N],
      ['stimulusDiffSquared', state.stimulusDiffSquared.length, N],
      ['stimulusBaseSquared', state.stimulusBaseSquared.length, N],
      ['meansA', state.meansA?.length ?? 0, state.keepChannelMeans ? N * C : 0],
      ['meansB', state.meansB?.length ?? 0, state.keepChannelMeans ? N * C : 0],
    ];
    if (!Number.isSafeInteger(N) || N < 0) throw new UsageError('E_DIFF_STATE', `${state.layer}: state has ${String(N)} stimuli`);
    for (const [name, got, wanted] of lengths) {
      if (got !== wanted) throw new UsageError('E_DIFF_STATE', `${state.layer}: state field ${name} has ${got} values, expected ${wanted}`);
    }
    accumulator.stimuli = N;
    accumulator.pooled.set(state.pooled);
    [accumulator.pearsonCount, accumulator.pearsonMeanA, accumulator.pearsonMeanB, accumulator.pearsonM2A, accumulator.pearsonM2B, accumulator.pearsonCoMoment] = Array.from(state.pearson) as [number, number, number, number, number, number];
    accumulator.channelMeanA.set(state.channelMeanA);
    accumulator.channelM2A.set(state.channelM2A);
    accumulator.channelMeanB.set(state.channelMeanB);
    accumulator.nonFiniteBase = state.nonFiniteBase;
    accumulator.nonFiniteMod = state.nonFiniteMod;
    accumulator.zeroNormStimuli = state.zeroNormStimuli;
    accumulator.stimulusChange.set(state.stimulusChange);
    accumulator.stimulusDiffSquared.set(state.stimulusDiffSquared);
    accumulator.stimulusBaseSquared.set(state.stimulusBaseSquared);
    if (state.meansA && state.meansB) {
      accumulator.meansA.set(state.meansA);
      accumulator.meansB.set(state.meansB);
    }
    return accumulator;
  }

  /**
   * Adds a batch of `rows` stimuli, the same stimuli in the same order on both sides.
   *
   * @param base baseline activations, exactly rows × E values (pass a subarray for part of a buffer).
   * @param mod modulated activations, same layout.
   * @param rows number of stimuli in the batch (0 is a no-op).
   * @throws UsageError when rows is not a non-negative integer or a side's length is not rows × E.
   */
  add(base: Float32Array, mod: Float32Array, rows: number): void {
    if (!Number.isInteger(rows) || rows < 0) {
      throw new UsageError('E_DIFF_BATCH', `${this.layer}: batch rows = ${String(rows)} is not a non-negative integer`);
    }
    const E = this.elements;
    for (const [side, data] of [
      ['baseline', base],
      ['modulated', mod],
    ] as const) {
      if (data.length !== rows * E) {
        throw new UsageError(
          'E_DIFF_BATCH',
          `${this.layer}: ${side} batch has ${data.length} values but rows × elements = ${rows} × ${E} = ${rows * E}`,
          { hint: 'pass exactly the batch (use subarray for part of a buffer)' },
        );
      }
    }
    this.reserve(this.stimuli + rows);
    for (let n = 0; n < rows; n++) this.addStimulus(base, mod, n * E);
  }

  private addStimulus(base: Float32Array, mod: Float32Array, offset: number): void {
    const C = this.channels;
    const S = this.spatial;
    const n = this.stimuli;
    const seen = n + 1;
    const inverseSeen = 1 / seen;
    // [N, C]: i = n*C + k; without kept means, row 0 is scratch space that is overwritten each stimulus.
    const meanRow = this.keepChannelMeans ? n * C : 0;
    const meansA = this.meansA;
    const meansB = this.meansB;
    const channelMeanA = this.channelMeanA;
    const channelM2A = this.channelM2A;
    const channelMeanB = this.channelMeanB;
    let sumA = 0;
    let sumB = 0;
    let sumAA = 0;
    let sumBB = 0;
    let sumAB = 0;
    let sumDD = 0;
    // Two copies of the channel loop so that the S = 1 case carries no inner loop (branch hoisted).
    if (S === 1) {
      for (let k = 0; k < C; k++) {
        const a = base[offset + k]!;
        const b = mod[offset + k]!;
        const d = b - a;
        sumA += a;
        sumB += b;
        sumAA += a * a;
        sumBB += b * b;
        sumAB += a * b;
        sumDD += d * d;
        meansA[meanRow + k] = a;
        meansB[meanRow + k] = b;
        const delta = a - channelMeanA[k]!;
        channelMeanA[k] += delta * inverseSeen;
        channelM2A[k] += delta * (a - channelMeanA[k]!);
        channelMeanB[k] += (b - channelMeanB[k]!) * inverseSeen;
      }
      // As below: a non-finite sum of squares means a non-finite input; count only then.
      if (!Number.isFinite(sumAA)) this.nonFiniteBase += countNonFinite(base, offset, offset + C);
      if (!Number.isFinite(sumBB)) this.nonFiniteMod += countNonFinite(mod, offset, offset + C);
    } else {
      for (let k = 0; k < C; k++) {
        const start = offset + k * S; // channel k of this stimulus: [start, start + S)
        const end = start + S;
        let ca = 0;
        let cb = 0;
        let caa = 0;
        let cbb = 0;
        let cab = 0;
        let cdd = 0;
        for (let i = start; i < end; i++) {
          const a = base[i]!;
          const b = mod[i]!;
          const d = b - a;
          ca += a;
          cb += b;
          caa += a * a;
          cbb += b * b;
          cab += a * b;
          cdd += d * d;
        }
        // A float32 squared never overflows a double, so a non-finite sum of squares means a non-finite input.
        if (!Number.isFinite(caa)) this.nonFiniteBase += countNonFinite(base, start, end);
        if (!Number.isFinite(cbb)) this.nonFiniteMod += countNonFinite(mod, start, end);
        sumA += ca;
        sumB += cb;
        sumAA += caa;
        sumBB += cbb;
        sumAB += cab;
        sumDD += cdd;
        const am = ca / S;
        const bm = cb / S;
        meansA[meanRow + k] = am;
        meansB[meanRow + k] = bm;
        const delta = am - channelMeanA[k]!;
        channelMeanA[k] += delta * inverseSeen;
        channelM2A[k] += delta * (am - channelMeanA[k]!);
        channelMeanB[k] += (bm - channelMeanB[k]!) * inverseSeen;
      }
    }
    if (sumAA === 0) this.zeroNormStimuli++;
    this.stimulusChange[n] = relativeNorm(sumDD, sumAA);
    this.stimulusDiffSquared[n] = sumDD;
    this.stimulusBaseSquared[n] = sumAA;
    addCompensated(this.pooled, AA, sumAA);
    addCompensated(this.pooled, BB, sumBB);
    addCompensated(this.pooled, AB, sumAB);
    addCompensated(this.pooled, DD, sumDD);
    // This stimulus' centred moments (clamped at 0 against cancellation), merged into the pooled ones.
    const E = this.elements;
    const meanA = sumA / E;
    const meanB = sumB / E;
    const m2A = Math.max(0, sumAA - sumA * meanA);
    const m2B = Math.max(0, sumBB - sumB * meanB);
    // Cauchy–Schwarz bound, so that rounding cannot push |r| above 1 or break a = b → r = 1.
    const bound = Math.sqrt(m2A * m2B);
    const coMoment = Math.max(-bound, Math.min(bound, sumAB - sumA * meanB));
    this.mergePearson(E, meanA, meanB, m2A, m2B, coMoment);
    this.stimuli = seen;
  }

  private mergePearson(count: number, meanA: number, meanB: number, m2A: number, m2B: number, coMoment: number): void {
    const before = this.pearsonCount;
    const total = before + count;
    const dA = meanA - this.pearsonMeanA;
    const dB = meanB - this.pearsonMeanB;
    const weight = (before * count) / total;
    this.pearsonM2A += m2A + dA * dA * weight;
    this.pearsonM2B += m2B + dB * dB * weight;
    this.pearsonCoMoment += coMoment + dA * dB * weight;
    this.pearsonMeanA += (dA * count) / total;
    this.pearsonMeanB += (dB * count) / total;
    this.pearsonCount = total;
  }

  /**
   * Folds in another accumulator's statistics, computed over a disjoint set of stimuli (a shard). The
   * pooled sums and moments combine by exact formulas; the per-stimulus vectors are concatenated, this
   * accumulator's stimuli first. `other` is not modified.
   *
   * @param other an accumulator with the same elements, channels, spatial, tolerance and keepChannelMeans.
   * @returns this, for chaining.
   * @throws UsageError when the shapes or tolerances differ, or `other` is this accumulator.
   */
  merge(other: LayerDiffAccumulator): this {
    if (other === this) throw new UsageError('E_DIFF_MERGE', `${this.layer}: cannot merge an accumulator with itself`);
    if (
      other.elements !== this.elements ||
      other.channels !== this.channels ||
      other.spatial !== this.spatial ||
      other.tolerance !== this.tolerance ||
      other.keepChannelMeans !== this.keepChannelMeans
    ) {
      throw new UsageError(
        'E_DIFF_MERGE',
        `${this.layer}: cannot merge shape ${other.channels}×${other.spatial} (tolerance ${other.tolerance}, keepChannelMeans ${other.keepChannelMeans}) into ${this.channels}×${this.spatial} (tolerance ${this.tolerance}, keepChannelMeans ${this.keepChannelMeans})`,
      );
    }
    const n = this.stimuli;
    const m = other.stimuli;
    if (m === 0) return this;
    const total = n + m;
    this.reserve(total);
    const C = this.channels;
    for (let k = 0; k < C; k++) {
      const delta = other.channelMeanA[k]! - this.channelMeanA[k]!;
      this.channelM2A[k] += other.channelM2A[k]! + (delta * delta * n * m) / total;
      this.channelMeanA[k] += (delta * m) / total;
      this.channelMeanB[k] += ((other.channelMeanB[k]! - this.channelMeanB[k]!) * m) / total;
    }
    for (let i = 0; i < 4; i++) {
      addCompensated(this.pooled, i, other.pooled[2 * i]!);
      addCompensated(this.pooled, i, other.pooled[2 * i + 1]!);
    }
    this.mergePearson(
      other.pearsonCount,
      other.pearsonMeanA,
      other.pearsonMeanB,
      other.pearsonM2A,
      other.pearsonM2B,
      other.pearsonCoMoment,
    );
    this.stimulusChange.set(other.stimulusChange.subarray(0, m), n);
    this.stimulusDiffSquared.set(other.stimulusDiffSquared.subarray(0, m), n);
    this.stimulusBaseSquared.set(other.stimulusBaseSquared.subarray(0, m), n);
    if (this.keepChannelMeans) {
      this.meansA.set(other.meansA.subarray(0, m * C), n * C);
      this.meansB.set(other.meansB.subarray(0, m * C), n * C);
    }
    this.nonFiniteBase += other.nonFiniteBase;
    this.nonFiniteMod += other.nonFiniteMod;
    this.zeroNormStimuli += other.zeroNormStimuli;
    this.stimuli = total;
    return this;
  }

  /**
   * The per-stimulus channel means a_nk and b_nk accumulated so far (e.g. for the signature bootstrap).
   *
   * @returns views [N, C] into the accumulator's buffers; valid until the next `add` or `merge`
   *   (copy them with `slice()` to keep them).
   * @throws UsageError when the accumulator was made with `keepChannelMeans: false`.
   */
  channelMeans(): ChannelMeans {
    if (!this.keepChannelMeans) {
      throw new UsageError('E_DIFF_OPTION', `${this.layer}: channel means were not kept (keepChannelMeans: false)`, {
        hint: 'create the accumulator with keepChannelMeans: true for layers that need a signature',
      });
    }
    const size = this.stimuli * this.channels;
    return {
      stimuli: this.stimuli,
      channels: this.channels,
      base: this.meansA.subarray(0, size),
      mod: this.meansB.subarray(0, size),
    };
  }

  /**
   * Per stimulus n: Σ(b − a)² and Σa² over its elements (views, length N), so that the pooled relative
   * change sqrt(Σ_n diffSquared / Σ_n baseSquared) can be bootstrapped over stimuli.
   */
  perStimulusNorms(): { diffSquared: Float64Array; baseSquared: Float64Array } {
    return { diffSquared: this.stimulusDiffSquared.subarray(0, this.stimuli), baseSquared: this.stimulusBaseSquared.subarray(0, this.stimuli) };
  }

  /**
   * The layer's metrics over everything added so far. Does not reset; more batches may follow.
   *
   * @returns the metrics (see `LayerDiffMetrics` for each definition and its edge cases).
   * @throws UsageError when no stimulus has been added.
   */
  finish(): LayerDiffMetrics {
    if (this.stimuli === 0) {
      throw new UsageError('E_DIFF_EMPTY', `${this.layer}: no stimuli were added to the diff`, {
        hint: 'check that both snapshots hold rows for this layer',
      });
    }
    const pooled = this.pooled;
    return layerDiffMetrics({
      stimuli: this.stimuli,
      elements: this.elements,
      channels: this.channels,
      spatial: this.spatial,
      tolerance: this.tolerance,
      sumAA: pooled[2 * AA]! + pooled[2 * AA + 1]!,
      sumBB: pooled[2 * BB]! + pooled[2 * BB + 1]!,
      sumAB: pooled[2 * AB]! + pooled[2 * AB + 1]!,
      sumDD: pooled[2 * DD]! + pooled[2 * DD + 1]!,
      pearsonM2A: this.pearsonM2A,
      pearsonM2B: this.pearsonM2B,
      pearsonCoMoment: this.pearsonCoMoment,
      channelMeanA: this.channelMeanA,
      channelM2A: this.channelM2A,
      channelMeanB: this.channelMeanB,
      stimulusChange: this.stimulusChange.subarray(0, this.stimuli),
      zeroNormStimuli: this.zeroNormStimuli,
      nonFiniteBase: this.nonFiniteBase,
      nonFiniteMod: this.nonFiniteMod,
    });
  }

  private reserve(stimuli: number): void {
    if (stimuli <= this.capacity) return;
    let capacity = this.capacity * 2;
    while (capacity < stimuli) capacity *= 2;
    const change = new Float64Array(capacity);
    change.set(this.stimulusChange.subarray(0, this.stimuli));
    this.stimulusChange = change;
    const diffSquared = new Float64Array(capacity);
    diffSquared.set(this.stimulusDiffSquared.subarray(0, this.stimuli));
    this.stimulusDiffSquared = diffSquared;
    const baseSquared = new Float64Array(capacity);
    baseSquared.set(this.stimulusBaseSquared.subarray(0, this.stimuli));
    this.stimulusBaseSquared = baseSquared;
    if (this.keepChannelMeans) {
      const C = this.channels;
      const meansA = new Float32Array(capacity * C);
      meansA.set(this.meansA.subarray(0, this.stimuli * C));
      const meansB = new Float32Array(capacity * C);
      meansB.set(this.meansB.subarray(0, this.stimuli * C));
      this.meansA = meansA;
      this.meansB = meansB;
    }
    this.capacity = capacity;
  }
}

/** Neumaier's compensated addition (Neumaier 1974) into sums[2i] with its running error in sums[2i + 1]. */
function addCompensated(sums: Float64Array, i: number, value: number): void {
  const sum = sums[2 * i]!;
  const next = sum + value;
  if (Math.abs(sum) >= Math.abs(value)) sums[2 * i + 1] += sum - next + value;
  else sums[2 * i + 1] += value - next + sum;
  sums[2 * i] = next;
}

/** NaN and ±Infinity elements of data[start, end). */
function countNonFinite(data: Float32Array, start: number, end: number): number {
  let count = 0;
  for (let i = start; i < end; i++) if (!Number.isFinite(data[i]!)) count++;
  return count;
}
