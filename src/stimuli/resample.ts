/**
 * Separable antialiased resampling with the bilinear (triangle) and bicubic (Keys, a = −0.5) kernels,
 * following Pillow's `ImagingResample` (src/libImaging/Resample.c): the kernel is widened by the
 * reduction factor, sample centres sit at (i + 0.5)·scale, coefficients are normalised to sum 1, and 8-bit
 * images go through 22-bit fixed-point coefficients with rounding, horizontal pass first, clipped to
 * 0..255 after each pass. So `crop` with these kernels feeds what torchvision's Resize + CenterCrop give a
 * PIL image (checked against torchvision in tests/stimuli/resample.test.ts). 16-bit images use the same
 * coefficients in double precision, rounded once per pass.
 */

/** The kernels this resampler implements. */
export type ResampleKernel = 'bilinear' | 'bicubic';

const SUPPORT: Record<ResampleKernel, number> = { bilinear: 1, bicubic: 2 };

function weight(kernel: ResampleKernel, x: number): number {
  const t = Math.abs(x);
  if (kernel === 'bilinear') return t < 1 ? 1 - t : 0;
  const a = -0.5;
  if (t < 1) return ((a + 2) * t - (a + 3)) * t * t + 1;
  if (t < 2) return (((t - 5) * t + 8) * t - 4) * a;
  return 0;
}

/** Fixed-point precision of the 8-bit path (Pillow: 32 − 8 − 2). */
const PRECISION_BITS = 22;

/** Per output index: first input index, tap count, and the normalised coefficients (ksize per output). */
interface Coefficients {
  first: Int32Array;
  taps: Int32Array;
  ksize: number;
  values: Float64Array;
  fixed: Int32Array;
}

function coefficients(inSize: number, outSize: number, kernel: ResampleKernel): Coefficients {
  const scale = inSize / outSize;
  const filterScale = Math.max(scale, 1);
  const support = SUPPORT[kernel] * filterScale;
  const ss = 1 / filterScale;
  const ksize = Math.ceil(support) * 2 + 1;
  const first = new Int32Array(outSize);
  const taps = new Int32Array(outSize);
  const values = new Float64Array(outSize * ksize);
  const fixed = new Int32Array(outSize * ksize);
  for (let o = 0; o < outSize; o++) {
    const centre = (o + 0.5) * scale;
    // C's (int) truncates toward zero; the arguments here are ≥ −support + 0.5 so Math.trunc matches
    const lo = Math.max(Math.trunc(centre - support + 0.5), 0);
    const count = Math.min(Math.trunc(centre + support + 0.5), inSize) - lo;
    let sum = 0;
    for (let k = 0; k < count; k++) {
      const w = weight(kernel, (k + lo - centre + 0.5) * ss);
      values[o * ksize + k] = w;
      sum += w;
    }
    for (let k = 0; k < count; k++) {
      if (sum !== 0) values[o * ksize + k]! /= sum;
      const v = values[o * ksize + k]! * (1 << PRECISION_BITS);
      fixed[o * ksize + k] = v < 0 ? Math.trunc(-0.5 + v) : Math.trunc(0.5 + v);
    }
    first[o] = lo;
    taps[o] = count;
  }
  return { first, taps, ksize, values, fixed };
}

/**
 * Resizes interleaved pixels (HWC, `channels` per pixel) from height×width to outHeight×outWidth.
 * @returns a new array of the same type (Uint8Array: Pillow's fixed-point path; Uint16Array: doubles).
 */
export function resamplePixels<T extends Uint8Array | Uint16Array>(pixels: T, height: number, width: number, channels: number, outHeight: number, outWidth: number, kernel: ResampleKernel): T {
  let current: Uint8Array | Uint16Array = pixels;
  let [h, w] = [height, width];
  if (outWidth !== w) {
    current = pass(current, h, w, channels, outWidth, kernel, true);
    w = outWidth;
  }
  if (outHeight !== h) {
    current = pass(current, h, w, channels, outHeight, kernel, false);
    h = outHeight;
  }
  return (current === pixels ? pixels.slice() : current) as T;
}

/** One pass along the rows (`horizontal`) or the columns. */
function pass(input: Uint8Array | Uint16Array, height: number, width: number, channels: number, outSize: number, kernel: ResampleKernel, horizontal: boolean): Uint8Array | Uint16Array {
  const eight = input instanceof Uint8Array;
  const c = coefficients(horizontal ? width : height, outSize, kernel);
  const outHeight = horizontal ? height : outSize;
  const outWidth = horizontal ? outSize : width;
  const output = eight ? new Uint8Array(outHeight * outWidth * channels) : new Uint16Array(outHeight * outWidth * channels);
  const max = eight ? 255 : 65535;
  const half = 1 << (PRECISION_BITS - 1);
  // HWC: pixel (y, x) channel s at (y*W + x)*channels + s; the tap stride is one pixel along the pass
  const tapStride = horizontal ? channels : width * channels;
  for (let y = 0; y < outHeight; y++) {
    for (let x = 0; x < outWidth; x++) {
      const o = horizontal ? x : y;
      const lo = c.first[o]!;
      const count = c.taps[o]!;
      const base = horizontal ? (y * width + lo) * channels : (lo * width + x) * channels;
      const k0 = o * c.ksize;
      for (let s = 0; s < channels; s++) {
        let value: number;
        if (eight) {
          let acc = half;
          for (let k = 0; k < count; k++) acc += input[base + k * tapStride + s]! * c.fixed[k0 + k]!;
          value = acc >> PRECISION_BITS; // arithmetic shift, as Pillow's clip8
        } else {
          let acc = 0;
          for (let k = 0; k < count; k++) acc += input[base + k * tapStride + s]! * c.values[k0 + k]!;
          value = Math.round(acc);
        }
        output[(y * outWidth + x) * channels + s] = value < 0 ? 0 : value > max ? max : value;
      }
    }
  }
  return output;
}
