/**
 * Pixel arithmetic of composed stimuli, on 8-bit interleaved RGB (HWC). Pure.
 */

/**
 * Blends two images of the same size: out = round(w·a + (1 − w)·b) per value, halves rounded up
 * (computed in doubles). `w` is the weight of `a`.
 */
export function blendPixels(a: Uint8Array, b: Uint8Array, weight: number): Uint8Array {
  const out = new Uint8Array(a.length);
  const rest = 1 - weight;
  for (let i = 0; i < a.length; i++) out[i] = Math.round(weight * a[i]! + rest * b[i]!);
  return out;
}

/**
 * Tiles `cells` (each cellHeight×cellWidth RGB, row-major order of the k×k grid: cell r·k + c at row r,
 * column c) into one (k·cellHeight)×(k·cellWidth) RGB image, exact copies.
 */
export function tilePixels(cells: readonly Uint8Array[], k: number, cellHeight: number, cellWidth: number): Uint8Array {
  const width = k * cellWidth;
  const out = new Uint8Array(k * cellHeight * width * 3);
  const rowBytes = cellWidth * 3;
  cells.forEach((cell, index) => {
    const [r, c] = [Math.floor(index / k), index % k];
    // HWC: pixel (y, x) at (y*width + x)*3
    for (let y = 0; y < cellHeight; y++) out.set(cell.subarray(y * rowBytes, (y + 1) * rowBytes), ((r * cellHeight + y) * width + c * cellWidth) * 3);
  });
  return out;
}

/**
 * Places a decoded block (8- or 16-bit) into an 8-bit cell of `height`×`width`, black around it (only
 * letterboxed blocks leave a border); 16-bit values become round(v / 257).
 */
export function blockToCell(block: { pixels: Uint8Array | Uint16Array; height: number; width: number; maxValue: number; top: number; left: number }, height: number, width: number): Uint8Array {
  const out = new Uint8Array(height * width * 3);
  const scale = block.maxValue === 255 ? 1 : 1 / 257;
  for (let y = 0; y < block.height; y++) {
    for (let x = 0; x < block.width; x++) {
      const from = (y * block.width + x) * 3;
      const to = ((block.top + y) * width + block.left + x) * 3;
      for (let s = 0; s < 3; s++) out[to + s] = Math.round(block.pixels[from + s]! * scale);
    }
  }
  return out;
}
