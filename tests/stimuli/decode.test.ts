import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { deflateSync } from 'node:zlib';
import sharp from 'sharp';
import { describe, expect, it } from 'vitest';
import { decodeImage, fitGeometry } from '../../src/stimuli/decode.js';
import { pixelsToPlanar, type Preprocessing } from '../../src/stimuli/preprocess.js';

const unit = (size: [number, number], extra: Partial<Preprocessing> = {}): Preprocessing => ({ size, mean: [0, 0, 0], std: [1, 1, 1], bgr: false, ...extra });

/** An 8-bit RGB PNG whose pixel (x, y) is (x mod 256, y mod 256, (3x + 7y) mod 256). */
async function coordinatePng(width: number, height: number): Promise<Buffer> {
  const raw = Buffer.alloc(width * height * 3);
  for (let y = 0; y < height; y++) {
    for (let x = 0; x < width; x++) {
      const i = (y * width + x) * 3;
      raw[i] = x % 256;
      raw[i + 1] = y % 256;
      raw[i + 2] = (3 * x + 7 * y) % 256;
    }
  }
  return sharp(raw, { raw: { width, height, channels: 3 } }).png().toBuffer();
}

/** CRC-32 as the PNG specification (ISO/IEC 15948, annex D) defines it. */
function crc32(bytes: Buffer): number {
  let crc = 0xffffffff;
  for (const byte of bytes) {
    crc ^= byte;
    for (let k = 0; k < 8; k++) crc = crc & 1 ? 0xedb88320 ^ (crc >>> 1) : crc >>> 1;
  }
  return (crc ^ 0xffffffff) >>> 0;
}

/** A 16-bit PNG written by hand after the PNG specification: big-endian samples, filter 0 on every row. */
function png16(width: number, height: number, channels: 1 | 3, samples: number[]): Buffer {
  const chunk = (type: string, data: Buffer): Buffer => {
    const length = Buffer.alloc(4);
    length.writeUInt32BE(data.length);
    const body = Buffer.concat([Buffer.from(type, 'latin1'), data]);
    const crc = Buffer.alloc(4);
    crc.writeUInt32BE(crc32(body));
    return Buffer.concat([length, body, crc]);
  };
  const header = Buffer.alloc(13);
  header.writeUInt32BE(width, 0);
  header.writeUInt32BE(height, 4);
  header[8] = 16;
  header[9] = channels === 1 ? 0 : 2;
  const rows: Buffer[] = [];
  for (let y = 0; y < height; y++) {
    const row = Buffer.alloc(1 + width * channels * 2);
    for (let i = 0; i < width * channels; i++) row.writeUInt16BE(samples[y * width * channels + i]!, 1 + 2 * i);
    rows.push(row);
  }
  return Buffer.concat([Buffer.from([137, 80, 78, 71, 13, 10, 26, 10]), chunk('IHDR', header), chunk('IDAT', deflateSync(Buffer.concat(rows))), chunk('IEND', Buffer.alloc(0))]);
}

describe('fitGeometry', () => {
  it('fitGeometry crop matches torchvision Resize(S) + CenterCrop on every fixture case (tests/stimuli/fixtures/crop-geometry.json)', () => {
    // source: torchvision transforms, geometry only; see make_crop_geometry.py
    const fixture = JSON.parse(readFileSync(join(__dirname, 'fixtures', 'crop-geometry.json'), 'utf8')) as { cases: Array<{ height: number; width: number; shorterSide: number; crop: [number, number]; resized: [number, number]; top: number; left: number }> };
    expect(fixture.cases.length).toBeGreaterThanOrEqual(10);
    for (const c of fixture.cases) {
      const g = fitGeometry(c.height, c.width, unit(c.crop, { fit: 'crop', shorterSide: c.shorterSide }));
      expect(g.resize, JSON.stringify(c)).toEqual(c.resized);
      expect(g.extract, JSON.stringify(c)).toEqual({ top: c.top, left: c.left, height: c.crop[0], width: c.crop[1] });
    }
  });

  it('fitGeometry crop puts an odd margin where Python round() does (halves to even; Python docs: round(0.5) is 0, round(1.5) is 2)', () => {
    expect(fitGeometry(225, 225, unit([224, 224], { fit: 'crop', shorterSide: 225 })).extract).toMatchObject({ top: 0, left: 0 });
    expect(fitGeometry(227, 227, unit([224, 224], { fit: 'crop', shorterSide: 227 })).extract).toMatchObject({ top: 2, left: 2 });
  });

  it('fitGeometry crop defaults the shorter side to the larger input side (hand-computed: 300x200 → 224x336, corner (0, 56))', () => {
    expect(fitGeometry(200, 300, unit([224, 224], { fit: 'crop' }))).toEqual({ resize: [224, 336], extract: { top: 0, left: 56, height: 224, width: 224 }, place: { top: 0, left: 0, height: 224, width: 224 } });
  });

  it('fitGeometry letterbox scales to fit inside and centres (hand-computed: 300 wide x 200 high into 224x224 → 149x224 at row 37)', () => {
    // s = min(224/200, 224/300) = 0.74667; 200·s = 149.33 → 149; (224 − 149) / 2 = 37.5 → 37
    expect(fitGeometry(200, 300, unit([224, 224], { fit: 'letterbox' }))).toEqual({ resize: [149, 224], extract: null, place: { top: 37, left: 0, height: 149, width: 224 } });
  });

  it('fitGeometry squash stretches to the target whatever the aspect ratio', () => {
    expect(fitGeometry(200, 300, unit([64, 32]))).toEqual({ resize: [64, 32], extract: null, place: { top: 0, left: 0, height: 64, width: 32 } });
  });

  it('fitGeometry refuses a shorter side smaller than the crop', () => {
    expect(() => fitGeometry(200, 300, unit([224, 224], { fit: 'crop', shorterSide: 200 }))).toThrow(/shorter side must be a whole number ≥ the input's larger side 224/);
  });
});

describe('decodeImage', () => {
  it('decodeImage crop cuts exactly the hand-computed window when no resize is needed (300x200, shorter side 200, 160x160 at (20, 70))', async () => {
    const png = await coordinatePng(300, 200);
    const block = await decodeImage(png, unit([160, 160], { fit: 'crop', shorterSide: 200 }), 3);
    expect([block.height, block.width, block.maxValue]).toEqual([160, 160, 255]);
    // window corner: top = (200 − 160) / 2 = 20, left = (300 − 160) / 2 = 70
    let wrong = 0;
    for (let y = 0; y < 160; y++) {
      for (let x = 0; x < 160; x++) {
        const i = (y * 160 + x) * 3;
        const [sx, sy] = [x + 70, y + 20];
        if (block.pixels[i] !== sx % 256 || block.pixels[i + 1] !== sy % 256 || block.pixels[i + 2] !== (3 * sx + 7 * sy) % 256) wrong++;
      }
    }
    expect(wrong).toBe(0);
  });

  it('decodeImage letterbox feeds the image exactly and 0 (the mean colour) in the bands, with the ImageNet preset too', async () => {
    const png = await coordinatePng(20, 10);
    const prep = unit([20, 20], { fit: 'letterbox', mean: [0.485, 0.456, 0.406], std: [0.229, 0.224, 0.225] });
    const block = await decodeImage(png, prep, 3);
    expect([block.top, block.left, block.height, block.width]).toEqual([5, 0, 10, 20]);
    const out = new Float32Array(3 * 20 * 20).fill(Number.NaN);
    pixelsToPlanar(block, prep, out, 0);
    // CHW: channel c, row y, column x at c*400 + y*20 + x
    expect(out[0 * 400 + 0 * 20 + 3]).toBe(0);
    expect(out[2 * 400 + 19 * 20 + 19]).toBe(0);
    expect(out[0 * 400 + 5 * 20 + 7]).toBeCloseTo((7 / 255 - 0.485) / 0.229, 6);
    expect(out[1 * 400 + 14 * 20 + 2]).toBeCloseTo((9 / 255 - 0.456) / 0.224, 6);
    expect(out.some((v) => Number.isNaN(v))).toBe(false);
  });

  it('decodeImage feeds a greyscale image to all three channels of an RGB model', async () => {
    const grey = await sharp(Buffer.from([0, 60, 200, 255]), { raw: { width: 2, height: 2, channels: 1 } }).png().toBuffer();
    const block = await decodeImage(grey, unit([2, 2]), 3);
    expect([...block.pixels]).toEqual([0, 0, 0, 60, 60, 60, 200, 200, 200, 255, 255, 255]);
  });

  it('decodeImage keeps 16-bit samples at 16 bits (hand-written PNG; fed value p / 65535)', async () => {
    const samples = [0, 1000, 40000, 65535, 12345, 54321];
    const grey = await decodeImage(png16(3, 2, 1, samples), unit([2, 3], { mean: [0], std: [1] }), 1);
    expect(grey.maxValue).toBe(65535);
    expect([...grey.pixels]).toEqual(samples);
    const rgb = await decodeImage(png16(2, 1, 3, [100, 30000, 65535, 1, 2, 3]), unit([1, 2]), 3);
    expect([...rgb.pixels]).toEqual([100, 30000, 65535, 1, 2, 3]);
    const out = new Float32Array(6);
    pixelsToPlanar(rgb, unit([1, 2]), out, 0);
    expect(out[1]).toBeCloseTo(1 / 65535, 9);
    expect(out[4]).toBeCloseTo(65535 / 65535, 9);
  });

  it('decodeImage composites alpha onto black: value × alpha / 255 (hand-computed: 200, 100, 50 at alpha 128 → 100, 50, 25)', async () => {
    const rgba = await sharp(Buffer.from([200, 100, 50, 128, 10, 20, 30, 255]), { raw: { width: 2, height: 1, channels: 4 } }).png().toBuffer();
    const block = await decodeImage(rgba, unit([1, 2]), 3);
    expect([...block.pixels]).toEqual([100, 50, 25, 10, 20, 30]);
  });

  it('decodeImage converts CMYK to RGB (a red patch stays red; its raw C, M, Y channels would read as cyan)', async () => {
    const cmyk = await sharp({ create: { width: 8, height: 8, channels: 3, background: { r: 220, g: 30, b: 40 } } }).toColourspace('cmyk').jpeg({ quality: 100 }).toBuffer();
    expect((await sharp(cmyk).metadata()).space).toBe('cmyk');
    const block = await decodeImage(cmyk, unit([8, 8]), 3);
    expect(block.channels).toBe(3);
    expect(block.pixels[0]).toBeGreaterThan(180);
    expect(block.pixels[1]).toBeLessThan(80);
    expect(block.pixels[2]).toBeLessThan(80);
  });

  it('decodeImage applies the EXIF orientation (tag 6: rotate 90° clockwise to view, EXIF 2.3 table of orientations)', async () => {
    // stored 3 wide x 2 high, top row red 0, 100, 200 left to right; upright it is 2 wide x 3 high with that row as its right column
    const raw = Buffer.alloc(3 * 2 * 3);
    for (let x = 0; x < 3; x++) raw[x * 3] = x * 100;
    const tagged = await sharp(raw, { raw: { width: 3, height: 2, channels: 3 } }).png().withMetadata({ orientation: 6 }).toBuffer();
    const block = await decodeImage(tagged, unit([3, 2]), 3);
    const red = (x: number, y: number): number => block.pixels[(y * 2 + x) * 3]!;
    expect([red(1, 0), red(1, 1), red(1, 2)]).toEqual([0, 100, 200]);
    expect([red(0, 0), red(0, 1), red(0, 2)]).toEqual([0, 0, 0]);
    // squashing to a 3x3 target starts from the upright 2x3, so a 3-high target needs no vertical resize
    expect(fitGeometry(3, 2, unit([3, 3])).resize).toEqual([3, 3]);
  });

  it('decodeImage squash with lanczos3 (what a manifest without fit or kernel means) gives the bytes earlier builds fed, so old baselines still pair', async () => {
    const png = await coordinatePng(30, 20);
    // the pipeline of builds before the fit was recorded: drop alpha, sRGB, resize to fill with sharp's default kernel
    const earlier = await sharp(png, { failOn: 'error' }).removeAlpha().toColourspace('srgb').resize(16, 16, { fit: 'fill' }).raw().toBuffer();
    const block = await decodeImage(png, { size: [16, 16], mean: [0, 0, 0], std: [1, 1, 1], bgr: false }, 3);
    expect(Buffer.from(block.pixels.buffer, block.pixels.byteOffset, block.pixels.byteLength).equals(earlier)).toBe(true);
  });

  it('decodeImage feeds a colour image to a one-channel model as luminance', async () => {
    const png = await sharp(Buffer.from([255, 255, 255, 0, 0, 0]), { raw: { width: 2, height: 1, channels: 3 } }).png().toBuffer();
    const block = await decodeImage(png, unit([1, 2], { mean: [0], std: [1] }), 1);
    expect([...block.pixels]).toEqual([255, 0]);
  });
});
