/**
 * Filling the injected G (gain) and B (offset) inputs of a modulated model for one batch.
 *
 * Layout: the site's shape with its position axes set to 1 when the modulation is not spatial
 * (`[rows, C, 1, 1]`, `[rows, 1, D]`; i = n·F + f), the site's whole shape when a window or a token
 * selection weighs positions (`[rows, C, H, W]`, `[rows, T, D]`; i = n·O·F·I + (o·F + f)·I + i' in the
 * layout geometry, so NCHW: i = ((n*C + c)*H + h)*W + w). With position weight w and the modulation's
 * own gain g and offset b there: G = outside + w·(g − outside), B = w·b (no weights: G = g, B = b). A
 * shared site (first axis not the batch) gets one row whatever `rows` is.
 *
 * Noise is drawn per stimulus from `createRandom(seed).fork(site).fork(stimulusIndex)`, one standard
 * normal z per feature (per feature and position when spatial) in the element order of the stimulus
 * (NCHW for maps), so a stimulus gets the same draw whatever batch it lands in. Multiplicative: g = g_k·(1 + sd·z), clamped
 * at 0 unless `allowNegative`; additive: b = b_k + sd·z.
 */
import { RuntimeFailure } from '../errors.js';
import { createRandom } from '../random.js';
import { gainInputDims, siteGeometry } from './site-shape.js';
import type { ResolvedModulation } from './types.js';

export { gainFromValues, normaliseAcrossCategories } from './gain-pattern.js';

/** Which stimuli a batch holds: global indices `firstStimulus … firstStimulus + rows − 1`. */
export interface BatchRange {
  /** Global index of the batch's first stimulus (≥ 0); noise draws depend on it. */
  firstStimulus: number;
  /** Number of stimuli in the batch (≥ 0). */
  rows: number;
}

/** A pair of G and B tensors with their shape. */
export interface ModulationInputs {
  gain: Float32Array;
  offset: Float32Array;
  shape: number[];
}

/**
 * Shape of the G and B inputs for a batch: `[rows, C, 1, 1]` or `[rows, C, H, W]` (spatial) for a map,
 * `[rows, C, 1, 1]` for a vector (as fed: `[rows, C]`), `[rows, 1, D]` or `[rows, T, D]` for tokens;
 * for a shared site the one broadcast row (`[1, D]`).
 * @throws RuntimeFailure when `rows` is not a non-negative integer.
 */
export function inputShape(resolved: ResolvedModulation, rows: number): number[] {
  checkCount(rows, 'rows');
  const site = resolved.siteShape;
  if (!site.shared && site.layout.kind === 'vector') return [rows, resolved.features, 1, 1];
  return gainInputDims(site, rows, resolved.spatial);
}

/** Number of elements of each of G and B for a batch of `rows` (the product of `inputShape`). */
export function inputLength(resolved: ResolvedModulation, rows: number): number {
  return inputShape(resolved, rows).reduce((a, b) => a * b, 1);
}

/**
 * Writes G and B for a batch.
 * @param resolved A resolved modulation.
 * @param batch Global index of the first stimulus and the number of rows.
 * @param gainOut Receives G; length must equal `inputLength(resolved, batch.rows)`.
 * @param offsetOut Receives B; same length.
 * @throws RuntimeFailure when a buffer has the wrong length or the batch range is not made of
 *   non-negative integers (a caller bug, not a user error).
 * Edge cases: rows = 0 writes nothing; sd = 0 gives exactly the noiseless inputs.
 */
export function fillModulationInputs(resolved: ResolvedModulation, batch: BatchRange, gainOut: Float32Array, offsetOut: Float32Array): void {
  const { rows, firstStimulus } = batch;
  checkCount(firstStimulus, 'firstStimulus');
  const length = inputLength(resolved, rows);
  if (gainOut.length !== length || offsetOut.length !== length) {
    const shape = inputShape(resolved, rows).join(', ');
    throw new RuntimeFailure(
      'E_MODULATION_BUFFER',
      `fillModulationInputs(${JSON.stringify(resolved.site)}): buffers must hold ${length} values ([${shape}]), got gain ${gainOut.length}, offset ${offsetOut.length}`,
    );
  }
  if (resolved.siteShape.shared) fillPerChannel(resolved, 0, 1, gainOut, offsetOut);
  else if (resolved.spatial) fillSpatial(resolved, firstStimulus, rows, gainOut, offsetOut);
  else fillPerChannel(resolved, firstStimulus, rows, gainOut, offsetOut);
}

/**
 * Allocates and fills G and B for a batch (`fillModulationInputs` into fresh buffers).
 * @throws RuntimeFailure as `fillModulationInputs`.
 */
export function modulationInputs(resolved: ResolvedModulation, batch: BatchRange): ModulationInputs {
  const length = inputLength(resolved, batch.rows);
  const gain = new Float32Array(length);
  const offset = new Float32Array(length);
  fillModulationInputs(resolved, batch, gain, offset);
  return { gain, offset, shape: inputShape(resolved, batch.rows) };
}

/**
 * The identity inputs G = 1, B = 0 in the modulation's layout: with them the instrumented model computes
 * exactly what the unmodulated one does: in IEEE arithmetic x·1 + 0 = x for every x except −0, which
 * becomes +0 (equal under ===, different bits).
 * @throws RuntimeFailure when `rows` is not a non-negative integer.
 */
export function identityInputs(resolved: ResolvedModulation, rows: number): ModulationInputs {
  const length = inputLength(resolved, rows);
  return { gain: new Float32Array(length).fill(1), offset: new Float32Array(length), shape: inputShape(resolved, rows) };
}

function checkCount(n: number, name: string): void {
  if (!Number.isSafeInteger(n) || n < 0) throw new RuntimeFailure('E_MODULATION_BUFFER', `modulation inputs: ${name} must be an integer ≥ 0, got ${n}`);
}

// [rows, C, 1, 1] or [rows, 1, D]: i = n*F + f
function fillPerChannel(r: ResolvedModulation, first: number, rows: number, gainOut: Float32Array, offsetOut: Float32Array): void {
  const channels = r.features;
  const { gain, offset, noise } = r;
  if (noise === null) {
    for (let n = 0; n < rows; n++) {
      gainOut.set(gain, n * channels);
      offsetOut.set(offset, n * channels);
    }
    return;
  }
  const stream = createRandom(noise.seed).fork(r.site);
  const sd = noise.sd;
  const lower = r.allowNegative ? -Infinity : 0;
  if (noise.mode === 'multiplicative') {
    for (let n = 0; n < rows; n++) {
      const random = stream.fork(first + n);
      const row = n * channels;
      for (let c = 0; c < channels; c++) {
        const g = gain[c]! * (1 + sd * random.normal());
        gainOut[row + c] = g < lower ? lower : g;
        offsetOut[row + c] = offset[c]!;
      }
    }
  } else {
    for (let n = 0; n < rows; n++) {
      const random = stream.fork(first + n);
      const row = n * channels;
      for (let c = 0; c < channels; c++) {
        gainOut[row + c] = gain[c]!;
        offsetOut[row + c] = offset[c]! + sd * random.normal();
      }
    }
  }
}

// spatial: i = n*O*F*I + (o*F + f)*I + i' with position p = o*I + i' (NCHW: O = 1, I = H*W, p = h*W + w;
// tokens: O = T, I = 1, p = token)
function fillSpatial(r: ResolvedModulation, first: number, rows: number, gainOut: Float32Array, offsetOut: Float32Array): void {
  const { outer, features: channels, inner } = siteGeometry(r.siteShape);
  const rowLength = outer * channels * inner;
  const weights = r.window!;
  const outside = r.outside;
  const { gain, offset, noise } = r;
  if (noise === null) {
    // every row is the same: build row 0, then copy it
    for (let o = 0; o < outer; o++) {
      for (let c = 0; c < channels; c++) {
        const g = gain[c]!;
        const b = offset[c]!;
        const start = (o * channels + c) * inner;
        const at = o * inner;
        for (let i = 0; i < inner; i++) {
          const w = weights[at + i]!;
          gainOut[start + i] = outside + w * (g - outside);
          offsetOut[start + i] = w * b;
        }
      }
    }
    for (let n = 1; n < rows; n++) {
      gainOut.copyWithin(n * rowLength, 0, rowLength);
      offsetOut.copyWithin(n * rowLength, 0, rowLength);
    }
    return;
  }
  const stream = createRandom(noise.seed).fork(r.site);
  const sd = noise.sd;
  const lower = r.allowNegative ? -Infinity : 0;
  const multiplicative = noise.mode === 'multiplicative';
  for (let n = 0; n < rows; n++) {
    const random = stream.fork(first + n);
    for (let o = 0; o < outer; o++) {
      const at = o * inner;
      for (let c = 0; c < channels; c++) {
        const start = n * rowLength + (o * channels + c) * inner;
        const gc = gain[c]!;
        const bc = offset[c]!;
        if (multiplicative) {
          for (let i = 0; i < inner; i++) {
            const w = weights[at + i]!;
            let g = gc * (1 + sd * random.normal());
            if (g < lower) g = lower;
            gainOut[start + i] = outside + w * (g - outside);
            offsetOut[start + i] = w * bc;
          }
        } else {
          for (let i = 0; i < inner; i++) {
            const w = weights[at + i]!;
            gainOut[start + i] = outside + w * (gc - outside);
            offsetOut[start + i] = w * (bc + sd * random.normal());
          }
        }
      }
    }
  }
}
