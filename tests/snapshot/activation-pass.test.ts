import { describe, expect, it } from 'vitest';
import { countHalfNonFinite, float16Pass, float32Pass, nonFiniteInFeatures } from '../../src/snapshot/activation-pass.js';
import { featureMeans, layoutGeometry } from '../../src/graph/layout.js';
import { float32ToFloat16, fromFloat16Bits } from '../../src/snapshot/float16.js';
import { createRandom } from '../../src/random.js';

/** Direct count (the definition): elements that are NaN or ±Infinity. */
function scanNonFinite(values: ArrayLike<number>): number {
  let n = 0;
  for (let i = 0; i < values.length; i++) if (!Number.isFinite(values[i]!)) n++;
  return n;
}

/** Random activations with NaN, ±Infinity and huge finite values planted at random places. */
function planted(seed: number, length: number, plants: number): Float32Array {
  const rng = createRandom(seed);
  const data = new Float32Array(length).map(() => (rng.uniform() - 0.5) * 10);
  const specials = [NaN, Infinity, -Infinity, 3.4e38, -3.4e38, 70000, 65519];
  for (let k = 0; k < plants; k++) data[Math.floor(rng.uniform() * length)] = specials[Math.floor(rng.uniform() * specials.length)]!;
  return data;
}

describe('float32Pass', () => {
  // exact property: a double sum of finite float32 values is finite, so the count from the means equals a full scan
  it('float32Pass(data) gives featureMeans and the same NaN/±Infinity count as a full scan, for every layout geometry', () => {
    // the long-run kernel (H·W ≥ 16, with and without a remainder of 4) and the general one
    const shapes: Array<[number[], { featureAxis: number | null }]> = [[[5, 6, 7], { featureAxis: 0 }], [[4, 8, 8], { featureAxis: 0 }], [[2, 3, 17], { featureAxis: 1 }], [[9, 8], { featureAxis: 1 }], [[12], { featureAxis: 0 }], [[3, 4, 5], { featureAxis: 1 }]];
    for (const [seed, [shape, axis]] of shapes.entries()) {
      const g = layoutGeometry(shape, { kind: 'channels-first', source: 'shape', ...axis });
      const rows = 3;
      const per = shape.reduce((a, b) => a * b, 1);
      for (const plants of [0, 1, 5, 40]) {
        const data = planted(seed * 100 + plants, rows * per, plants);
        const { means, nonFinite } = float32Pass(data, rows, g);
        // float64 sums in another order differ by at most n·2^-52 of the sum of magnitudes (standard
        // summation error bound, Higham, Accuracy and Stability of Numerical Algorithms, §4.2), then one
        // float32 rounding
        const reference = featureMeans(data, rows, g);
        const magnitudes = featureMeans(data.map(Math.abs), rows, g);
        for (let i = 0; i < means.length; i++) {
          if (!Number.isFinite(reference[i]!)) expect(means[i]).toBe(reference[i]);
          else expect(Math.abs(means[i]! - reference[i]!)).toBeLessThanOrEqual(magnitudes[i]! * per * 2 ** -52 + Math.abs(reference[i]!) * 2 ** -23);
        }
        expect(nonFinite).toBe(scanNonFinite(data));
      }
    }
  });

  it('nonFiniteInFeatures counts +Infinity and −Infinity in one feature (their sum is NaN) and nothing in finite features', () => {
    const g = layoutGeometry([2, 3], null);
    const data = Float32Array.from([Infinity, -Infinity, 1, 2, 3, 4]);
    const means = featureMeans(data, 1, g);
    expect(Number.isNaN(means[0])).toBe(true);
    expect(nonFiniteInFeatures(data, 1, g, means)).toBe(2);
  });
});

describe('float16Pass', () => {
  it('float16Pass(bits) gives the float64 means of the decoded values and counts the bit patterns that are NaN or ±Infinity', () => {
    const shape = [4, 5, 6];
    const g = layoutGeometry(shape, null);
    const rows = 2;
    const data = planted(3, rows * 120, 12);
    const bits = float32ToFloat16(data);
    const decoded = Array.from(bits, (b) => fromFloat16Bits(b));
    const { means, nonFinite } = float16Pass(bits, rows, g);
    for (let r = 0; r < rows; r++) {
      for (let c = 0; c < 4; c++) {
        let sum = 0;
        for (let i = 0; i < 30; i++) sum += decoded[r * 120 + c * 30 + i]!;
        expect(means[r * 4 + c]).toBe(Math.fround(sum / 30));
      }
    }
    // IEEE 754-2008 binary16: 70000 and 3.4e38 overflow to ±Infinity, 65519 rounds to 65504 (finite)
    expect(nonFinite).toBe(scanNonFinite(decoded));
    expect(countHalfNonFinite(bits)).toBe(scanNonFinite(decoded));
  });
});
