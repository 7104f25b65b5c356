/**
 * Raster pictures decode back (sharp, an independent PNG decoder path) to the expected size and colours:
 * the lowest and highest values take viridis' end colours (matplotlib's viridis: #440154 and #fde725,
 * from memory), a difference of 0 is white, and a box outline is drawn in black on its edge.
 */
import sharp from 'sharp';
import { describe, expect, it } from 'vitest';
import { mapPicture, stimulusPicture } from '../../../src/report/pictures/raster.js';

async function pixels(uri: string): Promise<{ data: Buffer; width: number; height: number }> {
  const { data, info } = await sharp(Buffer.from(uri.replace(/^data:image\/png;base64,/, ''), 'base64')).raw().toBuffer({ resolveWithObject: true });
  return { data, width: info.width, height: info.height };
}

const at = (p: { data: Buffer; width: number }, x: number, y: number) => [...p.data.subarray((y * p.width + x) * 3, (y * p.width + x) * 3 + 3)];

describe('mapPicture', () => {
  it('mapPicture: activity maps the range ends to viridis ends, enlarged with nearest-neighbour pixels', async () => {
    const picture = await mapPicture([0, 1, 0.5, 1], 2, 2, { scale: 'activity', range: [0, 1], factor: 4 });
    expect([picture.width, picture.height]).toEqual([8, 8]);
    const p = await pixels(picture.uri);
    expect(at(p, 0, 0)).toEqual([68, 1, 84]);
    expect(at(p, 3, 3)).toEqual([68, 1, 84]);
    expect(at(p, 4, 0)).toEqual([253, 231, 37]);
  });

  it('mapPicture: a difference of 0 is white; a box outline is black on its edge', async () => {
    const picture = await mapPicture(new Array(100).fill(0), 10, 10, { scale: 'difference', range: [0, 1], factor: 2, outline: { shape: 'box', x0: 0.2, x1: 0.6, y0: 0.2, y1: 0.6 } });
    const p = await pixels(picture.uri);
    expect(at(p, 19, 19)).toEqual([255, 255, 255]);
    expect(at(p, 4, 6)).toEqual([0, 0, 0]); // left edge x = 0.2 · 20 px
    expect(at(p, 10, 10)).toEqual([255, 255, 255]); // inside
  });
});

describe('stimulusPicture', () => {
  it('stimulusPicture: planar RGB stretched to its own range (min → 0, max → 255)', async () => {
    // 1×2 image: pixel 0 pure red at the maximum, pixel 1 everything at the minimum
    const picture = await stimulusPicture([2, -1, -1, -1, -1, -1], 1, 2, 1);
    const p = await pixels(picture.uri);
    expect(at(p, 0, 0)).toEqual([255, 0, 0]);
    expect(at(p, 1, 0)).toEqual([0, 0, 0]);
  });
});
