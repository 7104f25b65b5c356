import { UsageError } from '../errors.js';

/** How raw pixels become network input. Pixel values are first scaled to [0, 1]. */
export interface Preprocessing {
  /** Target height and width (images are resized to it; `.npy` inputs must already have it). */
  size: [number, number];
  /** Per-channel mean subtracted after scaling to [0, 1]. */
  mean: number[];
  /** Per-channel standard deviation divided by after the mean. */
  std: number[];
  /** Feed channels in BGR order instead of RGB. */
  bgr: boolean;
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

/**
 * Converts interleaved 8-bit pixels (HWC, `channels` per pixel) into normalised planar float32 (CHW)
 * at `out[offset...]`: x = (p / 255 − mean[c]) / std[c], channel order reversed when `bgr`.
 */
export function pixelsToPlanar(pixels: Uint8Array, height: number, width: number, channels: number, prep: Preprocessing, out: Float32Array, offset: number): void {
  const plane = height * width;
  for (let c = 0; c < channels; c++) {
    const sourceChannel = prep.bgr ? channels - 1 - c : c;
    const scale = 1 / (255 * prep.std[c]!);
    const shift = prep.mean[c]! / prep.std[c]!;
    const base = offset + c * plane;
    // HWC: pixel i channel s at i*channels + s; CHW: channel c pixel i at c*plane + i
    for (let i = 0; i < plane; i++) out[base + i] = pixels[i * channels + sourceChannel]! * scale - shift;
  }
}
