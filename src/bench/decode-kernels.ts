/**
 * Image decoding under `--fit crop:256` to 224×224, side by side: libvips' lanczos3 (resized inside the
 * decoder) against the Pillow-compatible bilinear and bicubic (decoded at full size, then resampled in
 * JavaScript), on seeded JPEGs of a typical photo size (500×375) and a camera size (4000×3000).
 */
import sharp from 'sharp';
import { createRandom } from '../random.js';
import { decodeImage } from '../stimuli/decode.js';
import type { Interpolation, Preprocessing } from '../stimuli/preprocess.js';
import type { Benchmark } from './types.js';

async function seededJpeg(width: number, height: number): Promise<Buffer> {
  const rng = createRandom(`decode-${width}x${height}`);
  const raw = Buffer.alloc(width * height * 3);
  // smooth gradients plus noise, like a photograph more than like white noise
  for (let y = 0; y < height; y++) for (let x = 0; x < width; x++) for (let s = 0; s < 3; s++) raw[(y * width + x) * 3 + s] = Math.max(0, Math.min(255, Math.round(((x + y * (s + 1)) * 255) / (width + height * 3) + 12 * rng.normal())));
  return sharp(raw, { raw: { width, height, channels: 3 } }).jpeg({ quality: 90 }).toBuffer();
}

async function millisecondsPerImage(image: Buffer, interpolation: Interpolation, repeats: number): Promise<number> {
  const prep: Preprocessing = { size: [224, 224], mean: [0, 0, 0], std: [1, 1, 1], bgr: false, fit: 'crop', shorterSide: 256, interpolation };
  await decodeImage(image, prep, 3); // warm-up
  const started = performance.now();
  for (let i = 0; i < repeats; i++) await decodeImage(image, prep, 3);
  return (performance.now() - started) / repeats;
}

export const benchDecodeKernels: Benchmark = async () => {
  const figures: Record<string, number> = {};
  for (const [label, width, height, repeats] of [['500x375', 500, 375, 40], ['4000x3000', 4000, 3000, 3]] as const) {
    const image = await seededJpeg(width, height);
    const lanczos = await millisecondsPerImage(image, 'lanczos3', repeats);
    const bilinear = await millisecondsPerImage(image, 'bilinear', repeats);
    const bicubic = await millisecondsPerImage(image, 'bicubic', repeats);
    figures[`${label} lanczos3 ms/image`] = lanczos;
    figures[`${label} bilinear ms/image`] = bilinear;
    figures[`${label} bicubic ms/image`] = bicubic;
    figures[`${label} bilinear ÷ lanczos3`] = bilinear / lanczos;
  }
  return {
    name: 'decode-kernels',
    description: 'decoding one JPEG for --fit crop:256 at 224x224: libvips lanczos3 vs the Pillow-compatible bilinear/bicubic',
    figures,
    notes: ['single thread of the event loop, images decoded one after another; record decodes a batch concurrently'],
  };
};
