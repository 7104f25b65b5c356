import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { decodeImage } from '../../src/stimuli/decode.js';
import { resamplePixels } from '../../src/stimuli/resample.js';
import type { Interpolation } from '../../src/stimuli/preprocess.js';

const FIXTURES = join(__dirname, 'fixtures');

describe('resamplePixels', () => {
  it('resamplePixels keeps a constant image constant (coefficients sum to 1) when enlarging and reducing', () => {
    const flat = new Uint8Array(7 * 5 * 3).fill(173);
    for (const kernel of ['bilinear', 'bicubic'] as const) {
      expect(new Set(resamplePixels(flat, 5, 7, 3, 11, 3, kernel))).toEqual(new Set([173]));
    }
  });

  it('resamplePixels bilinear halving weights three samples by the widened triangle (hand-computed)', () => {
    // 4 → 2: scale 2, support 2; output 0 centred at 1.0 takes inputs 0, 1, 2 (centres 0.5, 1.5, 2.5) with
    // weights 1 − d/2 = 0.75, 0.75, 0.25, normalised by 1.75: (0·0.75 + 100·0.75 + 200·0.25) / 1.75 = 71.43 → 71;
    // output 1 centred at 3.0 takes inputs 1, 2, 3: (100·0.25 + 200·0.75 + 50·0.75) / 1.75 = 121.43 → 121
    expect([...resamplePixels(Uint8Array.from([0, 100, 200, 50]), 1, 4, 1, 1, 2, 'bilinear')]).toEqual([71, 121]);
  });
});

describe('decodeImage (Pillow-compatible kernels)', () => {
  for (const kernel of ['bilinear', 'bicubic'] as Interpolation[]) {
    it(`decodeImage --fit crop:64 with ${kernel} gives torchvision's Resize(64) + CenterCrop(56) of a PIL image byte for byte (fixtures/make_resample.py)`, async () => {
      const expected = readFileSync(join(FIXTURES, `resample-${kernel}.bin`));
      const block = await decodeImage(join(FIXTURES, 'resample-photo.png'), { size: [56, 56], mean: [0, 0, 0], std: [1, 1, 1], bgr: false, fit: 'crop', shorterSide: 64, interpolation: kernel }, 3);
      let differing = 0;
      for (let i = 0; i < expected.length; i++) if (block.pixels[i] !== expected[i]) differing++;
      expect(block.pixels.length).toBe(expected.length);
      expect(differing).toBe(0);
    });

    it(`decodeImage squash with ${kernel} gives torchvision's Resize((40, 50)) of a PIL image byte for byte`, async () => {
      const expected = readFileSync(join(FIXTURES, `resample-${kernel}-squash.bin`));
      const block = await decodeImage(join(FIXTURES, 'resample-photo.png'), { size: [40, 50], mean: [0, 0, 0], std: [1, 1, 1], bgr: false, interpolation: kernel }, 3);
      let differing = 0;
      for (let i = 0; i < expected.length; i++) if (block.pixels[i] !== expected[i]) differing++;
      expect(differing).toBe(0);
    });
  }
});
