/**
 * Decodes one image file into the pixels a network is fed, the documented way:
 *
 * - **orientation**: an EXIF orientation tag is applied first (the image is fed upright, as a viewer
 *   shows it); sizes below are of the upright image;
 * - **alpha**: composited onto black (each colour value × alpha), then dropped;
 * - **colour**: converted to sRGB (CMYK through libvips' built-in CMYK profile, or the embedded ICC
 *   profile); a greyscale image feeds all three channels of an RGB model; a colour image feeding a
 *   one-channel model is converted to luminance (libvips' sRGB → B-W);
 * - **depth**: 16-bit images stay 16-bit (scaled by 1/65535), all others are 8-bit (1/255);
 * - **size**: `squash`, `crop` or `letterbox` with the named kernel (see `fitGeometry`): `bilinear` and
 *   `bicubic` with Pillow's antialiased resampler (resample.ts, what torchvision applies to PIL images),
 *   `lanczos3` and `nearest` with libvips'.
 */
import sharp from 'sharp';
import { resolvedFit, type Interpolation, type PixelBlock, type Preprocessing } from './preprocess.js';
import { resamplePixels } from './resample.js';

/** sharp's names of the kernels. */
const KERNELS: Record<Interpolation, 'nearest' | 'linear' | 'cubic' | 'lanczos3'> = {
  nearest: 'nearest',
  bilinear: 'linear',
  bicubic: 'cubic',
  lanczos3: 'lanczos3',
};

/** Where an image of a given size goes: resized to `resize`, then the `extract` window cut, placed at `place`. */
export interface FitGeometry {
  /** Height and width after resizing (equal to the source's when no resize is needed). */
  resize: [number, number];
  /** Window cut from the resized image (`crop`), or null. */
  extract: { top: number; left: number; height: number; width: number } | null;
  /** Where the result sits in the target (`letterbox`; 0, 0 otherwise) and its size. */
  place: { top: number; left: number; height: number; width: number };
}

/**
 * Python's round(): halves go to the even neighbour. torchvision's centre crop places its window at
 * int(round((size − crop) / 2)) (from memory of torchvision.transforms.functional.center_crop), so an
 * odd margin puts the extra pixel on the side this rounding picks.
 */
function roundHalfEven(x: number): number {
  const floor = Math.floor(x);
  const diff = x - floor;
  if (diff > 0.5) return floor + 1;
  if (diff < 0.5) return floor;
  return floor % 2 === 0 ? floor : floor + 1;
}

/**
 * The resize, cut and placement of an upright `height`×`width` image under `prep`:
 *
 * - `squash`: resize to the target H×W;
 * - `crop`: the shorter side becomes S (`shorterSide`), the longer ⌊S·long/short⌋ (truncated, as
 *   torchvision's Resize computes it, from memory), then the centre H×W window at
 *   (round((h′ − H)/2), round((w′ − W)/2)), halves to even;
 * - `letterbox`: scale s = min(H/h, W/w), size (round(h·s), round(w·s)) clamped to [1, H]×[1, W], placed at
 *   (⌊(H − h′)/2⌋, ⌊(W − w′)/2⌋); the bands around it are fed as 0.
 */
export function fitGeometry(height: number, width: number, prep: Preprocessing): FitGeometry {
  const [H, W] = prep.size;
  const { fit, shorterSide } = resolvedFit(prep);
  if (fit === 'squash') return { resize: [H, W], extract: null, place: { top: 0, left: 0, height: H, width: W } };
  if (fit === 'crop') {
    const resized: [number, number] = height <= width ? [shorterSide, Math.trunc((shorterSide * width) / height)] : [Math.trunc((shorterSide * height) / width), shorterSide];
    const top = roundHalfEven((resized[0] - H) / 2);
    const left = roundHalfEven((resized[1] - W) / 2);
    return { resize: resized, extract: { top, left, height: H, width: W }, place: { top: 0, left: 0, height: H, width: W } };
  }
  const scale = Math.min(H / height, W / width);
  const h = Math.min(H, Math.max(1, Math.round(height * scale)));
  const w = Math.min(W, Math.max(1, Math.round(width * scale)));
  return { resize: [h, w], extract: null, place: { top: Math.floor((H - h) / 2), left: Math.floor((W - w) / 2), height: h, width: w } };
}

/**
 * Decodes `file` for a model with `channels` (1 or 3) input channels under `prep` (see the file comment).
 * @throws Error from the decoder (the caller names the file); a RangeError for an image without a size.
 */
export async function decodeImage(file: string | Buffer, prep: Preprocessing, channels: number): Promise<PixelBlock> {
  const meta = await sharp(file, { failOn: 'error' }).metadata();
  const upright = meta.autoOrient ?? { width: meta.width, height: meta.height };
  if (!(upright.width > 0 && upright.height > 0)) throw new RangeError('the image has no width or height');
  const geometry = fitGeometry(upright.height, upright.width, prep);
  const sixteen = meta.depth === 'ushort';
  let image = sharp(file, { failOn: 'error' }).autoOrient();
  if (meta.hasAlpha) image = image.flatten({ background: { r: 0, g: 0, b: 0 } });
  const [rh, rw] = geometry.resize;
  const interpolation = resolvedFit(prep).interpolation;
  // bilinear and bicubic follow Pillow's resampler (resample.ts), applied here after decoding at full size
  const own = interpolation === 'bilinear' || interpolation === 'bicubic';
  const resizes = rh !== upright.height || rw !== upright.width;
  if (resizes && !own) image = image.resize(rw, rh, { fit: 'fill', kernel: KERNELS[interpolation] });
  if (geometry.extract && !own) image = image.extract(geometry.extract);
  if (channels === 1) image = sixteen ? image.toColourspace('grey16') : image.greyscale();
  else image = image.toColourspace(sixteen ? 'rgb16' : 'srgb');
  const { data, info } = await image.raw(sixteen ? { depth: 'ushort' } : {}).toBuffer({ resolveWithObject: true });
  // a 16-bit view needs an even byte offset; copy in the rare case the buffer sits at an odd one
  let pixels: Uint8Array | Uint16Array = !sixteen ? new Uint8Array(data.buffer, data.byteOffset, data.length) : data.byteOffset % 2 === 0 ? new Uint16Array(data.buffer, data.byteOffset, data.length / 2) : new Uint16Array(Uint8Array.from(data).buffer);
  let [height, width] = [info.height, info.width];
  if (own) {
    if (info.channels !== channels || height !== upright.height || width !== upright.width) throw new RangeError(`decoded to ${width}x${height} with ${info.channels} channels, expected ${upright.width}x${upright.height} with ${channels}`);
    if (resizes) [pixels, height, width] = [resamplePixels(pixels, height, width, channels, rh, rw, interpolation), rh, rw];
    if (geometry.extract) [pixels, height, width] = [cutWindow(pixels, width, channels, geometry.extract), geometry.extract.height, geometry.extract.width];
  }
  if (info.channels !== channels || width !== geometry.place.width || height !== geometry.place.height) {
    throw new RangeError(`decoded to ${width}x${height} with ${info.channels} channels, expected ${geometry.place.width}x${geometry.place.height} with ${channels}`);
  }
  return { pixels, height, width, channels, maxValue: sixteen ? 65535 : 255, top: geometry.place.top, left: geometry.place.left };
}

/** The window `w` of an interleaved image `width` pixels wide, as a new array. */
function cutWindow<T extends Uint8Array | Uint16Array>(pixels: T, width: number, channels: number, w: { top: number; left: number; height: number; width: number }): T {
  const out = (pixels instanceof Uint8Array ? new Uint8Array(w.height * w.width * channels) : new Uint16Array(w.height * w.width * channels)) as T;
  // HWC: row y of the window starts at ((top + y)*width + left)*channels
  for (let y = 0; y < w.height; y++) out.set(pixels.subarray(((w.top + y) * width + w.left) * channels, ((w.top + y) * width + w.left + w.width) * channels), y * w.width * channels);
  return out;
}
