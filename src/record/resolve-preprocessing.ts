/**
 * How a recording feeds its images: the options first, then the model's sidecar, then the defaults,
 * every field set so that the manifest says exactly what was done.
 */
import { UsageError } from '../errors.js';
import { parseFit, parseInterpolation, parseNormalise, presetValues, resolvedFit, type FitMode, type Interpolation, type NormalisePreset, type Preprocessing } from '../stimuli/preprocess.js';

/** The preprocessing options of a recording (part of RecordOptions, record-snapshot.ts). */
export interface PreprocessingOptions {
  /** Per-channel mean/std applied after scaling pixels to [0,1]; default from the model's sidecar, else 0 and 1. */
  mean?: number[];
  std?: number[];
  /** Feed BGR instead of RGB. */
  bgr?: boolean;
  /** A named mean/std (`imagenet`, `unit` [0, 1], `signed` [−1, 1]); not together with `mean`/`std`. */
  normalise?: NormalisePreset;
  /** How images reach the input size: `squash` (default), `crop` (shorter side, then the centre) or `letterbox`. */
  fit?: FitMode;
  /** For `crop`: the shorter side before the centre cut (default the larger input side). */
  shorterSide?: number;
  /** Resizing kernel (default `lanczos3`). */
  interpolation?: Interpolation;
}

/**
 * The preprocessing of a recording: options first, then the model's sidecar (`preprocessing.mean`,
 * `std`, `bgr`, and `normalise`, `fit` — e.g. "crop:256" — and `interpolation`), then scaling to [0, 1]
 * with `squash` and `lanczos3`; every field set, so the manifest says exactly how images were fed.
 * @throws UsageError for a preset given with `mean`/`std`, or an unknown fit, kernel or preset (the
 *   sidecar's named as such).
 */
export function resolvePreprocessing(options: PreprocessingOptions, sidecar: { mean?: number[]; std?: number[]; bgr?: boolean } | undefined, channels: number, size: [number, number]): Preprocessing {
  if (options.normalise && (options.mean || options.std)) {
    throw new UsageError('E_PREPROCESS', `--normalise ${options.normalise} sets the mean and std; it cannot be combined with --mean or --std`, { hint: 'pass either the preset or both values' });
  }
  if (options.shorterSide !== undefined && options.fit !== 'crop') throw new UsageError('E_PREPROCESS', `a shorter side (${options.shorterSide}) only applies to --fit crop`);
  const extra = (sidecar ?? {}) as { normalise?: unknown; fit?: unknown; interpolation?: unknown };
  const sidecarText = (key: 'normalise' | 'fit' | 'interpolation'): string | undefined => {
    const value = extra[key];
    if (value === undefined) return undefined;
    if (typeof value !== 'string') throw new UsageError('E_SIDECAR', `model sidecar preprocessing.${key} must be a string, got ${JSON.stringify(value)}`);
    return value;
  };
  const sidecarPreset = sidecarText('normalise');
  const sidecarFit = sidecarText('fit');
  const sidecarKernel = sidecarText('interpolation');
  const ownValues = options.mean !== undefined || options.std !== undefined;
  const presetName = options.normalise ?? (ownValues || sidecar?.mean || sidecar?.std || sidecarPreset === undefined ? undefined : parseNormalise(sidecarPreset, 'model sidecar preprocessing.normalise'));
  const preset = presetName ? presetValues(presetName, channels) : null;
  const fromSidecar = !options.normalise; // a sidecar's mean or std fills what the options leave open, unless a preset was named
  const mean = options.mean ?? preset?.mean ?? (fromSidecar ? sidecar?.mean : undefined) ?? new Array<number>(channels).fill(0);
  const std = options.std ?? preset?.std ?? (fromSidecar ? sidecar?.std : undefined) ?? new Array<number>(channels).fill(1);
  const unit = mean.every((v) => v === 0) && std.every((v) => v === 1);
  const fitted = options.fit !== undefined ? { fit: options.fit, shorterSide: options.shorterSide } : sidecarFit !== undefined ? parseFit(sidecarFit, 'model sidecar preprocessing.fit') : { fit: 'squash' as const, shorterSide: undefined };
  const fit = fitted.fit;
  const preprocessing: Preprocessing = {
    size,
    mean,
    std,
    bgr: options.bgr ?? sidecar?.bgr ?? false,
    fit,
    ...(fit === 'crop' ? { shorterSide: fitted.shorterSide ?? Math.max(size[0], size[1]) } : {}),
    interpolation: options.interpolation ?? (sidecarKernel !== undefined ? parseInterpolation(sidecarKernel, 'model sidecar preprocessing.interpolation') : 'lanczos3'),
    normalise: presetName ?? (unit ? 'unit' : 'custom'),
  };
  resolvedFit(preprocessing);
  return preprocessing;
}
