import { UsageError, closestHint } from '../errors.js';

/** How an image is brought to the network's input size (see `decodeImage`). */
export type FitMode = 'squash' | 'crop' | 'letterbox';
/** The fit modes, for option checking and messages. */
export const FIT_MODES: readonly FitMode[] = ['squash', 'crop', 'letterbox'];
/** Interpolation kernels for resizing (libvips, through sharp: nearest, linear, cubic Catmull-Rom, Lanczos a=3). */
export type Interpolation = 'nearest' | 'bilinear' | 'bicubic' | 'lanczos3';
/** The kernels, for option checking and messages. */
export const INTERPOLATIONS: readonly Interpolation[] = ['nearest', 'bilinear', 'bicubic', 'lanczos3'];
/** Kernel used when none is named (sharp's default; what Sonde used before the kernel was recorded). */
export const DEFAULT_INTERPOLATION: Interpolation = 'lanczos3';

/**
 * Named normalisations of pixel values p ∈ [0, 1]: x = (p − mean) / std.
 * `imagenet`: the per-channel mean and standard deviation of the ImageNet training images in RGB order
 * (0.485, 0.456, 0.406 / 0.229, 0.224, 0.225; the values torchvision's model documentation gives,
 * common practice); `unit`: x = p ∈ [0, 1]; `signed`: x = 2p − 1 ∈ [−1, 1].
 */
export const NORMALISE_PRESETS = {
  imagenet: { mean: [0.485, 0.456, 0.406], std: [0.229, 0.224, 0.225] },
  unit: { mean: [0], std: [1] },
  signed: { mean: [0.5], std: [0.5] },
} as const satisfies Record<string, { mean: readonly number[]; std: readonly number[] }>;
/** A preset's name. */
export type NormalisePreset = keyof typeof NORMALISE_PRESETS;

/**
 * How raw pixels become network input. Pixel values are first scaled to [0, 1] (8-bit images by 1/255,
 * 16-bit ones by 1/65535). The optional fields were added later: absent, they mean what older builds
 * did (`squash` with `lanczos3`), so manifests written before them read the same.
 */
export interface Preprocessing {
  /** Target height and width (images are brought to it; `.npy` inputs must already have it). */
  size: [number, number];
  /** Per-channel mean subtracted after scaling to [0, 1]. */
  mean: number[];
  /** Per-channel standard deviation divided by after the mean. */
  std: number[];
  /** Feed channels in BGR order instead of RGB. */
  bgr: boolean;
  /**
   * `squash`: resize both sides to the target (the aspect ratio changes); `crop`: resize so the shorter
   * side is `shorterSide`, then cut the centre; `letterbox`: resize to fit inside, centre, and feed 0
   * (the mean colour after normalisation) around it. Default `squash`.
   */
  fit?: FitMode;
  /** For `crop`: the shorter side's length before the centre cut (≥ both target sides; default the larger target side). */
  shorterSide?: number;
  /** Resizing kernel. Default `lanczos3`. */
  interpolation?: Interpolation;
  /** The preset the mean and std came from, or `custom` (given values, a sidecar's, or the [0, 1] default). */
  normalise?: NormalisePreset | 'custom';
}

/**
 * The fit, shorter side and kernel of `prep` with defaults filled in (manifests of older builds lack them).
 * @throws UsageError for an unknown fit or kernel, or a shorter side that cannot hold the target.
 */
export function resolvedFit(prep: Preprocessing): { fit: FitMode; shorterSide: number; interpolation: Interpolation } {
  const fit = prep.fit ?? 'squash';
  const interpolation = prep.interpolation ?? DEFAULT_INTERPOLATION;
  if (!FIT_MODES.includes(fit)) throw new UsageError('E_PREPROCESS', `preprocessing fit "${String(fit)}" is not one of ${FIT_MODES.join(', ')}`);
  if (!INTERPOLATIONS.includes(interpolation)) throw new UsageError('E_PREPROCESS', `preprocessing interpolation "${String(interpolation)}" is not one of ${INTERPOLATIONS.join(', ')}`);
  const [height, width] = prep.size;
  const shorterSide = prep.shorterSide ?? Math.max(height, width);
  if (!Number.isSafeInteger(shorterSide) || shorterSide < Math.max(height, width)) {
    throw new UsageError('E_PREPROCESS', `--fit crop:${shorterSide}: the shorter side must be a whole number ≥ the input's larger side ${Math.max(height, width)}`, { hint: `e.g. --fit crop:${Math.round(Math.max(height, width) / 0.875)} (shorter side ${Math.round(Math.max(height, width) / 0.875)}, then the centre ${height}x${width})` });
  }
  return { fit, shorterSide, interpolation };
}

/**
 * Parses `--fit`: `squash`, `letterbox`, `crop` or `crop:S` (S the shorter side before the centre cut).
 * @throws UsageError naming the value and the modes.
 */
export function parseFit(text: string, option = '--fit'): { fit: FitMode; shorterSide?: number } {
  const match = /^(squash|crop|letterbox)(?::(\d+))?$/.exec(text.trim());
  if (!match || (match[2] !== undefined && match[1] !== 'crop')) {
    const near = closestHint(text.trim().split(':')[0] ?? '', FIT_MODES);
    throw new UsageError('E_PREPROCESS', `${option} "${text}" is not a fit mode`, { hint: `${near ? `${near}; ` : ''}use squash, crop, crop:S (shorter side S, e.g. crop:256) or letterbox` });
  }
  return match[2] !== undefined ? { fit: 'crop', shorterSide: Number(match[2]) } : { fit: match[1] as FitMode };
}

/**
 * Parses `--interpolation`.
 * @throws UsageError naming the value and the kernels.
 */
export function parseInterpolation(text: string, option = '--interpolation'): Interpolation {
  const name = text.trim() as Interpolation;
  if (!INTERPOLATIONS.includes(name)) {
    const near = closestHint(name, INTERPOLATIONS);
    throw new UsageError('E_PREPROCESS', `${option} "${text}" is not an interpolation kernel`, { hint: `${near ? `${near}; ` : ''}use ${INTERPOLATIONS.join(', ')}` });
  }
  return name;
}

/**
 * Parses `--normalise`: a preset name.
 * @throws UsageError naming the value and the presets.
 */
export function parseNormalise(text: string, option = '--normalise'): NormalisePreset {
  const name = text.trim();
  if (!Object.hasOwn(NORMALISE_PRESETS, name)) {
    const names = Object.keys(NORMALISE_PRESETS);
    const near = closestHint(name, names);
    throw new UsageError('E_PREPROCESS', `${option} "${text}" is not a normalisation preset`, { hint: `${near ? `${near}; ` : ''}use ${names.join(', ')}, or give --mean and --std` });
  }
  return name as NormalisePreset;
}

/**
 * The mean and std of a preset for a model with `channels` input channels (single values repeated).
 * @throws UsageError when a three-channel preset meets a model with another channel count.
 */
export function presetValues(preset: NormalisePreset, channels: number): { mean: number[]; std: number[] } {
  const { mean, std } = NORMALISE_PRESETS[preset];
  if (mean.length !== 1 && mean.length !== channels) {
    throw new UsageError('E_PREPROCESS', `--normalise ${preset} has ${mean.length} values per channel list but the model input has ${channels} channels`, { hint: 'give --mean and --std for this model' });
  }
  const spread = (list: readonly number[]): number[] => (list.length === 1 ? new Array<number>(channels).fill(list[0]!) : [...list]);
  return { mean: spread(mean), std: spread(std) };
}

/**
 * Parses "a,b,c" into numbers, one per channel (a single value is repeated).
 * @throws UsageError naming the option when a value is not a finite number or the count is wrong.
 */
export function parseChannelList(text: string, channels: number, option: string): number[] {
  const values = text.split(',').map((s) => Number(s.trim()));
  if (values.some((v) => !Number.isFinite(v)) || text.trim() === '') {
    throw new UsageError('E_PREPROCESS', `${option} "${text}" must be comma-separated numbers, e.g. 0.485,0.456,0.406`);
  }
  if (channels <= 0) return values; // count checked later against the model
  if (values.length === 1) return new Array<number>(channels).fill(values[0]!);
  if (values.length !== channels) {
    throw new UsageError('E_PREPROCESS', `${option} "${text}" has ${values.length} values but the model input has ${channels} channels`);
  }
  return values;
}

/** Parses "HxW" (e.g. "224x224"). */
export function parseSize(text: string, option = '--size'): [number, number] {
  const match = /^(\d+)[x×](\d+)$/.exec(text.trim());
  if (!match || Number(match[1]) <= 0 || Number(match[2]) <= 0) throw new UsageError('E_PREPROCESS', `${option} "${text}" must look like HxW, e.g. 224x224`);
  return [Number(match[1]), Number(match[2])];
}

/** Parses "1x3x224x224" into dims. */
export function parseShape(text: string, option = '--input-shape'): number[] {
  const parts = text.trim().split(/[x×,]/);
  const dims = parts.map((p) => Number(p));
  if (parts.length === 0 || dims.some((d) => !Number.isInteger(d) || d <= 0)) {
    throw new UsageError('E_INPUT_SHAPE', `${option} "${text}" must be positive integers joined by x, e.g. 1x3x224x224`);
  }
  return dims;
}

/** Decoded pixels of one image and where they go in the network input (see `decodeImage`). */
export interface PixelBlock {
  /** Interleaved HWC values, `channels` per pixel. */
  pixels: Uint8Array | Uint16Array;
  height: number;
  width: number;
  channels: number;
  /** 255 for 8-bit images, 65535 for 16-bit ones. */
  maxValue: number;
  /** Offset of the block inside the target size (non-zero only for `letterbox`). */
  top: number;
  left: number;
}

/**
 * Writes a decoded block into normalised planar float32 (CHW of the target `prep.size`) at
 * `out[offset...]`: x = (p / maxValue − mean[c]) / std[c], channel order reversed when `bgr`; target
 * pixels outside the block (letterbox bands) are 0, the mean colour after normalisation.
 */
export function pixelsToPlanar(block: PixelBlock, prep: Preprocessing, out: Float32Array, offset: number): void {
  const [height, width] = prep.size;
  const { pixels, channels } = block;
  const plane = height * width;
  const covers = block.top === 0 && block.left === 0 && block.height === height && block.width === width;
  if (!covers) out.fill(0, offset, offset + channels * plane);
  for (let c = 0; c < channels; c++) {
    const sourceChannel = prep.bgr ? channels - 1 - c : c;
    const scale = 1 / (block.maxValue * prep.std[c]!);
    const shift = prep.mean[c]! / prep.std[c]!;
    const base = offset + c * plane;
    // block HWC: pixel (y, x) channel s at (y*w + x)*channels + s; target CHW: channel c at c*plane + (top + y)*W + left + x
    for (let y = 0; y < block.height; y++) {
      const row = base + (block.top + y) * width + block.left;
      const from = y * block.width;
      for (let x = 0; x < block.width; x++) out[row + x] = pixels[(from + x) * channels + sourceChannel]! * scale - shift;
    }
  }
}
