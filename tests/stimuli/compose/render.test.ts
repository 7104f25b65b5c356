import { describe, expect, it } from 'vitest';
import { blendPixels, blockToCell, tilePixels } from '../../../src/stimuli/compose/render.js';

describe('blendPixels', () => {
  it('blendPixels with weight 1/4 equals the integer form ⌊(a + 3b + 2) / 4⌋ (round half up) on every pair of 8-bit values', () => {
    const a = new Uint8Array(256 * 256);
    const b = new Uint8Array(256 * 256);
    for (let i = 0; i < 256; i++) for (let j = 0; j < 256; j++) [a[i * 256 + j], b[i * 256 + j]] = [i, j];
    const out = blendPixels(a, b, 0.25);
    let wrong = 0;
    for (let k = 0; k < a.length; k++) if (out[k] !== Math.floor((a[k]! + 3 * b[k]! + 2) / 4)) wrong++;
    expect(wrong).toBe(0);
  });

  it('blendPixels with weight 1/2 rounds halves up: (1, 2) → 2, (0, 255) → 128', () => {
    expect([...blendPixels(Uint8Array.from([1, 0]), Uint8Array.from([2, 255]), 0.5)]).toEqual([2, 128]);
  });
});

describe('tilePixels', () => {
  it('tilePixels puts cell r·k + c at row r, column c, as exact copies', () => {
    // four 1x2 cells, each filled with its index
    const cells = [0, 1, 2, 3].map((v) => new Uint8Array(1 * 2 * 3).fill(v));
    const out = tilePixels(cells, 2, 1, 2);
    // 2 rows x 4 columns, HWC: pixel (y, x) at (y*4 + x)*3
    const at = (y: number, x: number): number => out[(y * 4 + x) * 3]!;
    expect([at(0, 0), at(0, 1), at(0, 2), at(0, 3), at(1, 0), at(1, 3)]).toEqual([0, 0, 1, 1, 2, 3]);
  });
});

describe('blockToCell', () => {
  it('blockToCell places a letterboxed block on black and brings 16-bit values to 8 bits as round(v / 257)', () => {
    const cell = blockToCell({ pixels: Uint16Array.from([65535, 257, 128]), height: 1, width: 1, maxValue: 65535, top: 1, left: 0 }, 2, 1);
    expect([...cell]).toEqual([0, 0, 0, 255, 1, 0]);
  });
});
