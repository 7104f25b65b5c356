/**
 * `fitReadoutHeads`: one binary detector per category on a recorded layer of a baseline snapshot —
 * L2 logistic regression on the layer's per-channel means (spatially averaged feature maps, or a vector
 * layer), features standardised with the fitting set's statistics, the regularisation C chosen by
 * stratified seeded k-fold cross-validation (validation log-loss), optional class balancing — written
 * into a new ONNX model (`graph/readout-heads.ts`) with a sidecar that names the heads as the readout.
 * Record, modulation, tail replay, sense, sweep and diff then use the heads like any readout.
 *
 * A seeded part of the stimuli (stratified by label set) is held out of the fit and of the
 * cross-validation, and reported separately.
 */
import { rocAuc } from '../stats/roc.js';
import { crossValidateLogistic, featureScaling, predictLogits, standardiseRows, stratifiedFolds } from '../stats/logistic-regression.js';
import { RuntimeFailure, UsageError } from '../errors.js';
import { createRandom } from '../random.js';
import { replaceFile } from '../disk/atomic-file.js';
import { loadModel, type LoadedModel } from '../graph/load-model.js';
import { addReadoutHeads } from '../graph/readout-heads.js';
import { readSidecar, sidecarPath, type ModelSidecar } from '../graph/sidecar.js';
import { assertOutFileWritable } from '../outputs/output-file.js';
import { openSnapshot } from '../snapshot/snapshot.js';

/** Default candidate C values: decades from 10⁻⁴ to 10² (common practice: a log grid). */
export const DEFAULT_CS: readonly number[] = [1e-4, 1e-3, 1e-2, 1e-1, 1, 10, 100];

/** Options of `fitReadoutHeads`. */
export interface FitHeadsOptions {
  /** The model the baseline was recorded from (path or loaded). */
  model: string | LoadedModel;
  /** Baseline snapshot (labelled) whose layer the heads are fitted on. */
  from: string;
  /** Recorded layer the heads read ([C] or [C, …] per stimulus). */
  layer: string;
  /** Categories to fit a head for (default: every category of the baseline's labels). */
  categories?: readonly string[];
  /** Cross-validation folds k (default 5). */
  folds?: number;
  /** Candidate C values (default `DEFAULT_CS`). */
  Cs?: readonly number[];
  /** Weight classes by n / (2·n_class) (default false). */
  balanced?: boolean;
  /** Fraction of stimuli held out of fitting and cross-validation (default 0.2; 0: none). */
  heldOut?: number;
  /** Seed of the held-out split and the folds (default 1). */
  seed?: number;
  /** The new model (.onnx); its sidecar goes beside it (`X.onnx` → `X.json`). */
  out: string;
  force?: boolean;
  /** Name of the combined readout output (default `readout_heads`). */
  output?: string;
  /** Called as each category's head is fitted. */
  onProgress?: (done: number, total: number, category: string) => void;
}

/** ROC area and accuracy of a head on some stimuli. */
export interface HeadScore {
  auc: number;
  /** Fraction correct with "present" when the logit is above 0 (the head's threshold). */
  accuracy: number;
  positives: number;
  negatives: number;
}

/** One fitted head. */
export interface FittedHead {
  category: string;
  /** Output tensor of this head alone ([N, 1]). */
  output: string;
  /** Chosen C and the mean validation log-loss of every candidate. */
  C: number;
  losses: number[];
  /** Decision threshold on the logit (0 = probability 0.5). */
  threshold: number;
  /** Cross-validated (each fitting stimulus scored by the fold that left it out) and held-out scores. */
  crossValidated: HeadScore;
  heldOut: HeadScore | null;
  /** The refit on all fitting stimuli, over standardised channels (not written into the sidecar; the model holds them). */
  coefficients: { weights: number[]; intercept: number };
}

/** What `fitReadoutHeads` returns (also written into the sidecar as `heads`). */
export interface FitHeadsResult {
  model: string;
  sidecar: string;
  /** The combined readout output [N, K], in `heads` order. */
  output: string;
  layer: string;
  channels: number;
  /** Channels constant over the fitting stimuli (standardised to 0; their weights are 0). */
  constantChannels: number;
  from: string;
  fitStimuli: number;
  heldOutStimuli: number;
  folds: number;
  Cs: number[];
  balanced: boolean;
  seed: number;
  heads: FittedHead[];
  /** The fitting set's per-channel mean and scale (not written into the sidecar; the model holds them). */
  standardisation: { mean: number[]; scale: number[] };
  /** Stimulus indices held out of fitting. */
  heldOutRows: number[];
}

function score(logits: Float64Array, y: Uint8Array): HeadScore {
  let positives = 0;
  let correct = 0;
  for (let i = 0; i < y.length; i++) {
    positives += y[i]!;
    if ((logits[i]! > 0 ? 1 : 0) === y[i]) correct++;
  }
  const negatives = y.length - positives;
  return { auc: positives > 0 && negatives > 0 ? rocAuc(logits, y) : Number.NaN, accuracy: y.length > 0 ? correct / y.length : Number.NaN, positives, negatives };
}

/** Held-out stimuli: within each label set, a seeded shuffle and every stimulus whose rank falls in the fraction. */
function heldOutMask(labels: readonly string[][], fraction: number, seed: number): Uint8Array {
  const mask = new Uint8Array(labels.length);
  if (fraction <= 0) return mask;
  const groups = new Map<string, number[]>();
  labels.forEach((l, i) => {
    const key = [...l].sort().join('\u0000');
    const list = groups.get(key) ?? [];
    list.push(i);
    groups.set(key, list);
  });
  const rng = createRandom(seed).fork('held-out');
  let carry = 0;
  for (const key of [...groups.keys()].sort()) {
    const members = groups.get(key)!;
    for (let i = members.length - 1; i > 0; i--) {
      const j = Math.floor(rng.uniform() * (i + 1));
      [members[i], members[j]] = [members[j]!, members[i]!];
    }
    // carry the rounding over groups, so the total is round(fraction · n)
    for (const m of members) {
      carry += fraction;
      if (carry >= 1 - 1e-9) {
        mask[m] = 1;
        carry -= 1;
      }
    }
  }
  return mask;
}

/**
 * Fits the heads, writes the model and its sidecar (see the file comment).
 * @throws UsageError for a layer the baseline did not record, a category no stimulus has, fewer than k
 *   positives or negatives of a category among the fitting stimuli, a held-out fraction outside [0, 0.5],
 *   C values that are not positive, every channel constant, or an existing output without `force`;
 *   RuntimeFailure for a non-finite recorded value (naming the stimulus and channel).
 */
export async function fitReadoutHeads(options: FitHeadsOptions): Promise<FitHeadsResult> {
  const modelPath = typeof options.model === 'string' ? options.model : options.model.path;
  const sidecarOut = sidecarPath(options.out);
  if (!/\.onnx$/i.test(options.out)) throw new UsageError('E_HEADS', `--out ${options.out} must end in .onnx (its sidecar is written beside it as .json)`, { hint: `e.g. --out ${options.out}.onnx` });
  for (const [path, option] of [[options.out, '--out'], [sidecarOut, '--out (sidecar)']] as const) {
    assertOutFileWritable(path, { option, force: options.force ?? false, inputs: [{ option: 'MODEL', path: modelPath, file: true }, { option: '--from', path: options.from }, { option: 'MODEL sidecar', path: sidecarPath(modelPath), file: true }] });
  }
  const k = options.folds ?? 5;
  if (!Number.isInteger(k) || k < 2) throw new UsageError('E_HEADS', `--folds ${k} must be an integer of at least 2`);
  const Cs = [...(options.Cs ?? DEFAULT_CS)];
  if (Cs.length === 0 || Cs.some((c) => !(c > 0) || !Number.isFinite(c))) throw new UsageError('E_HEADS', `--c-values ${Cs.join(',')} must be positive numbers`, { hint: 'e.g. --c-values 0.001,0.01,0.1,1,10' });
  const fraction = options.heldOut ?? 0.2;
  if (!(fraction >= 0 && fraction <= 0.5)) throw new UsageError('E_HEADS', `--held-out ${fraction} must be a fraction in [0, 0.5]`, { hint: 'e.g. --held-out 0.2 (0 to fit on every stimulus)' });
  const seed = options.seed ?? 1;
  const model = typeof options.model === 'string' ? loadModel(options.model) : options.model;
  const snapshot = openSnapshot(options.from);
  if (snapshot.manifest.model.sha256 !== model.sha256) throw new UsageError('E_PAIRING', `--from ${options.from} was recorded from another model than ${model.fileName}`, { hint: 'fit heads on a baseline recorded from this model' });
  const entry = snapshot.manifest.layers.find((l) => l.name === options.layer);
  if (!entry) {
    const names = snapshot.manifest.layers.map((l) => l.name);
    throw new UsageError('E_HEADS', `--layer "${options.layer}" was not recorded in ${options.from} (${names.length} layers, e.g. ${names.slice(-3).join(', ')})`, { hint: 'record the baseline with --layers including it' });
  }
  if (entry.shape.length === 2) {
    // [C, L] and token layers [L, D] look alike; averaging the wrong axis would fit on nonsense
    throw new UsageError('E_HEADS', `--layer "${options.layer}" has shape [${entry.shape.join(', ')}] per stimulus; heads read feature maps [C, H, W] (averaged over space) or vectors [C]`, { hint: 'for a transformer pick a vector layer (the class-token or pooled features before the classifier)' });
  }
  const categories = [...(options.categories ?? snapshot.categories)];
  if (categories.length === 0) throw new UsageError('E_HEADS', `${options.from} has no labelled stimuli`, { hint: 'record the baseline with --labels' });
  const n = snapshot.manifest.stimuli.count;
  const C = snapshot.layerGeometry(options.layer).channels;
  const means = await snapshot.readChannelMeans(options.layer);
  for (let i = 0; i < n * C; i++) {
    if (!Number.isFinite(means[i]!)) throw new RuntimeFailure('E_HEADS', `layer "${options.layer}" of ${options.from} holds a non-finite value (${means[i]}) at stimulus ${Math.floor(i / C)} (${snapshot.stimuli.ids[Math.floor(i / C)]}), channel ${i % C}`, { hint: 'the network overflows on that stimulus; check its preprocessing, or fit on another layer' });
  }
  const labels = snapshot.stimuli.labels;
  const held = heldOutMask(labels, fraction, seed);
  const fitRows = Int32Array.from({ length: n }, (_, i) => i).filter((i) => !held[i]);
  const heldRows = Int32Array.from({ length: n }, (_, i) => i).filter((i) => held[i] === 1);
  const x = Float64Array.from(means);
  const xFit = standardiseRows(x, C, fitRows, { mean: new Float64Array(C), scale: new Float64Array(C).fill(1) });
  const nFit = fitRows.length;
  const scaling = featureScaling(xFit, nFit, C);
  if (scaling.constant === C) throw new UsageError('E_HEADS', `every channel of "${options.layer}" is constant over the ${nFit} fitting stimuli of ${options.from}`, { hint: 'fit on another layer (one whose activity varies with the stimulus)' });
  const xHeld = standardiseRows(x, C, heldRows, scaling);
  const heads: FittedHead[] = [];
  for (const category of categories) {
    const y = Uint8Array.from(fitRows, (i) => (labels[i]!.includes(category) ? 1 : 0));
    let positives = 0;
    for (let i = 0; i < y.length; i++) positives += y[i]!;
    if (positives === 0 && !snapshot.categories.includes(category)) throw new UsageError('E_HEADS', `no stimulus of ${options.from} is labelled "${category}"`, { hint: `categories there: ${snapshot.categories.slice(0, 8).join(', ')}${snapshot.categories.length > 8 ? ', …' : ''}` });
    if (positives < k || nFit - positives < k) {
      throw new UsageError('E_HEADS', `category "${category}" has ${positives} positive and ${nFit - positives} negative fitting stimuli; ${k}-fold cross-validation needs at least ${k} of each`, { hint: `use --folds ${Math.max(2, Math.min(positives, nFit - positives))} or more stimuli${fraction > 0 ? ', or a smaller --held-out' : ''}` });
    }
    const folds = stratifiedFolds(y, k, `${seed}:${category}`);
    // the cross-validation standardises each training part itself; the refit uses `scaling` (all fitting stimuli)
    const cv = crossValidateLogistic(xFit, nFit, C, y, { Cs, folds, ...(options.balanced ? { balanced: true } : {}) });
    const yHeld = Uint8Array.from(heldRows, (i) => (labels[i]!.includes(category) ? 1 : 0));
    heads.push({
      category,
      output: '',
      C: cv.C,
      losses: cv.losses,
      threshold: 0,
      crossValidated: score(cv.validationLogits, y),
      heldOut: heldRows.length > 0 ? score(predictLogits(xHeld, heldRows.length, C, cv.model), yHeld) : null,
      coefficients: { weights: Array.from(cv.model.weights), intercept: cv.model.intercept },
    });
    options.onProgress?.(heads.length, categories.length, category);
  }
  const written = addReadoutHeads(model, { layer: options.layer, rank: entry.shape.length, mean: scaling.mean, scale: scaling.scale, heads: heads.map((h) => ({ category: h.category, weights: Float64Array.from(h.coefficients.weights), intercept: h.coefficients.intercept })), ...(options.output !== undefined ? { output: options.output } : {}) });
  heads.forEach((h, i) => (h.output = written.headOutputs[i]!));
  const result: FitHeadsResult = {
    model: options.out,
    sidecar: sidecarOut,
    output: written.output,
    layer: options.layer,
    channels: C,
    constantChannels: scaling.constant,
    from: options.from,
    fitStimuli: nFit,
    heldOutStimuli: heldRows.length,
    folds: k,
    Cs,
    balanced: options.balanced ?? false,
    seed,
    heads,
    standardisation: { mean: Array.from(scaling.mean), scale: Array.from(scaling.scale) },
    heldOutRows: Array.from(heldRows),
  };
  const original = readSidecar(modelPath);
  const sidecar: ModelSidecar & { heads: unknown } = {
    ...(original?.preprocessing ? { preprocessing: original.preprocessing } : {}),
    ...(original?.layers ? { layers: original.layers } : {}),
    outputs: { name: written.output, kinds: categories, threshold: 0 },
    heads: { ...result, heads: heads.map(({ coefficients: _c, ...rest }) => rest), standardisation: undefined, heldOutRows: undefined },
  };
  replaceFile(options.out, written.bytes);
  replaceFile(sidecarOut, `${JSON.stringify(sidecar, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
  return result;
}
