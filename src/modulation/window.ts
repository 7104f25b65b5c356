/**
 * Weights of a spatial window over a feature map (see `SpatialWindow` in `types.ts`).
 *
 * Coordinates are map-relative: the centre of pixel (row h, column w) of an H×W map is at
 * x = (w + 0.5)/W, y = (h + 0.5)/H. A box weighs 1 where x0 ≤ x < x1 and y0 ≤ y < y1 and 0 elsewhere;
 * a Gaussian weighs exp(−d²/2σ²) with d² = (x − cx)² + (y − cy)².
 */
import { UsageError } from '../errors.js';
import type { SpatialWindow } from './types.js';

/**
 * Computes the window's weight at every position of an H×W map.
 * @param window A validated window (coordinates in [0, 1], x0 < x1, y0 < y1, sigma > 0).
 * @param height Map height H (≥ 1).
 * @param width Map width W (≥ 1).
 * @returns Weights in [0, 1], row-major `[H*W]` (i = h*W + w).
 * @throws UsageError when H or W is not a positive integer.
 * Edge cases: a box that contains no pixel centre gives all zeros (the resolver rejects it); Gaussian
 * weights far from the centre underflow to 0, which is exact enough for a gain.
 */
export function windowWeights(window: SpatialWindow, height: number, width: number): Float32Array {
  if (!Number.isSafeInteger(height) || height < 1 || !Number.isSafeInteger(width) || width < 1) {
    throw new UsageError('E_WINDOW', `windowWeights: map size must be positive integers, got ${height}×${width}`);
  }
  const weights = new Float32Array(height * width);
  if (window.shape === 'box') {
    for (let h = 0; h < height; h++) {
      const y = (h + 0.5) / height;
      if (y < window.y0 || y >= window.y1) continue;
      for (let w = 0; w < width; w++) {
        const x = (w + 0.5) / width;
        if (x >= window.x0 && x < window.x1) weights[h * width + w] = 1;
      }
    }
    return weights;
  }
  const twoSigmaSquared = 2 * window.sigma * window.sigma;
  for (let h = 0; h < height; h++) {
    const dy = (h + 0.5) / height - window.cy;
    for (let w = 0; w < width; w++) {
      const dx = (w + 0.5) / width - window.cx;
      weights[h * width + w] = Math.exp(-(dx * dx + dy * dy) / twoSigmaSquared);
    }
  }
  return weights;
}
