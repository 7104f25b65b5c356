import stdlibQuantile from '@stdlib/stats-base-dists-normal-quantile';
import { describe, expect, it } from 'vitest';
import { normalCdf, normalQuantile } from '../../src/stats/normal.js';
import { torchReference, TORCH } from '../helpers/torch-reference.js';

const DOUBLE_EPSILON = 2 ** -52;



describe('normalQuantile', () => {
  it('normalQuantile(p) matches the standard normal table at 0.975, 0.84 and 0.5', () => {
    // Abramowitz & Stegun (1964), Handbook of Mathematical Functions, Table 26.1, to 6 decimals.
    expect(Math.abs(normalQuantile(0.975) - 1.959964)).toBeLessThan(5e-7);
    expect(Math.abs(normalQuantile(0.84) - 0.994458)).toBeLessThan(5e-7);
    expect(normalQuantile(0.5)).toBe(0);
    // z(0.025) = −z(0.975) by symmetry of the normal distribution, so the same table entry applies.
    expect(Math.abs(normalQuantile(0.025) + 1.959964)).toBeLessThan(5e-7);
  });

  it('normalQuantile(p) matches @stdlib/stats-base-dists-normal-quantile over a grid of p in (0, 1) within 1e-12 relative', () => {
    // Independent reference: @stdlib's quantile (via its erfinv), a different algorithm from AS 241.
    // Grid p = i/2000; near the far lower tail @stdlib's 2p − 1 loses digits, so the grid stays above 1e-4.
    let worst = 0;
    for (let i = 1; i < 2000; i++) {
      const p = i / 2000;
      const ours = normalQuantile(p);
      const reference = stdlibQuantile(p, 0, 1);
      if (reference === 0) {
        expect(ours).toBe(0);
        continue;
      }
      worst = Math.max(worst, Math.abs(ours - reference) / Math.abs(reference));
    }
    expect(worst).toBeLessThan(1e-12);
  });

  it.skipIf(!TORCH)('normalQuantile(p) matches torch.special.ndtri in both tails (p = 1e-1 … 1e-300, 1 − 1e-1 … 1 − 1e-15) within 1e-14 relative', () => {
    // Independent reference: PyTorch (Debian python3-torch) ndtri, float64 (Cephes' algorithm).
    const ps: number[] = [];
    for (let k = 1; k <= 300; k++) ps.push(10 ** -k);
    for (let k = 1; k <= 15; k++) ps.push(1 - 10 ** -k);
    const reference = torchReference(
      'import json, sys, torch\np = torch.tensor(json.load(sys.stdin), dtype=torch.float64)\nprint(json.dumps(torch.special.ndtri(p).tolist()))',
      ps,
    ) as number[];
    let worst = 0;
    ps.forEach((p, i) => {
      worst = Math.max(worst, Math.abs(normalQuantile(p) - reference[i]!) / Math.abs(reference[i]!));
    });
    expect(worst).toBeLessThan(1e-14);
  });

  it('normalQuantile(1 − p) = −normalQuantile(p) exactly where both p and 1 − p are exact doubles', () => {
    // Exact property: the standard normal is symmetric; p = k/1024 makes p − 0.5 and (1 − p) − 0.5 exact negatives.
    for (let k = 1; k < 512; k++) {
      const p = k / 1024;
      expect(normalQuantile(1 - p)).toBe(-normalQuantile(p));
    }
  });

  it('normalQuantile(p) is strictly increasing over a fine grid', () => {
    // Exact property: a quantile function of a continuous distribution with positive density is strictly increasing.
    let previous = Number.NEGATIVE_INFINITY;
    for (let i = 1; i < 10_000; i++) {
      const z = normalQuantile(i / 10_000);
      expect(z).toBeGreaterThan(previous);
      previous = z;
    }
  });

  it('normalQuantile(p) returns the limits outside (0, 1) and NaN for NaN', () => {
    expect(normalQuantile(0)).toBe(Number.NEGATIVE_INFINITY);
    expect(normalQuantile(-0.5)).toBe(Number.NEGATIVE_INFINITY);
    expect(normalQuantile(1)).toBe(Number.POSITIVE_INFINITY);
    expect(normalQuantile(2)).toBe(Number.POSITIVE_INFINITY);
    expect(normalQuantile(Number.NaN)).toBeNaN();
    // Smallest positive double still gives a finite deviate (AS 241's far-tail region covers it).
    expect(Number.isFinite(normalQuantile(Number.MIN_VALUE))).toBe(true);
  });
});

describe('normalCdf', () => {
  it('normalCdf(x) matches the standard normal table at 0, 1, 1.96, 2, 3', () => {
    // Abramowitz & Stegun (1964), Table 26.1, P(x) to 10 decimals (values recalled from memory; the torch
    // comparison below checks them independently).
    expect(normalCdf(0)).toBe(0.5);
    expect(Math.abs(normalCdf(1) - 0.8413447461)).toBeLessThan(5e-11);
    expect(Math.abs(normalCdf(1.96) - 0.9750021049)).toBeLessThan(5e-11);
    expect(Math.abs(normalCdf(2) - 0.9772498681)).toBeLessThan(5e-11);
    expect(Math.abs(normalCdf(3) - 0.9986501020)).toBeLessThan(5e-11);
  });

  it.skipIf(!TORCH)('normalCdf(x) matches PyTorch 0.5·erfc(−x/√2) from −37.5 to 8.5 within 4ε·(1 + x²) relative', () => {
    // Independent reference: PyTorch (Debian python3-torch) erfc in float64; the erfc form keeps relative
    // accuracy in the lower tail (torch.special.ndtr itself computes (1 + erf)/2 and underflows early).
    // Tolerance: rounding x/√2 to a double perturbs erfc by its condition number ≈ x² times ε/2, so the
    // reference itself is only good to about ε·x².
    const xs: number[] = [];
    for (let x = -37.5; x <= 8.5; x += 0.0625) xs.push(x);
    const reference = torchReference(
      'import json, sys, torch\nx = torch.tensor(json.load(sys.stdin), dtype=torch.float64)\nprint(json.dumps((0.5 * torch.special.erfc(-x / 2 ** 0.5)).tolist()))',
      xs,
    ) as number[];
    xs.forEach((x, i) => {
      const relative = Math.abs(normalCdf(x) - reference[i]!) / reference[i]!;
      expect(relative).toBeLessThan(4 * DOUBLE_EPSILON * (1 + x * x));
    });
  });

  it('normalCdf(normalQuantile(p)) ≈ p from 1e-300 to 1 − 1e-15', () => {
    // Exact property (inverse functions). Tolerance: the condition number of Φ at z is |z·φ(z)/Φ(z)| ≈ 1 + z²
    // in the lower tail, so a relative error of a few ε in z becomes ≈ 8ε·(1 + z²) in p.
    for (let k = 1; k <= 300; k++) {
      const p = 10 ** -k;
      const z = normalQuantile(p);
      expect(Math.abs(normalCdf(z) - p) / p).toBeLessThan(8 * DOUBLE_EPSILON * (1 + z * z));
    }
    for (let i = 1; i < 1000; i++) {
      const p = i / 1000;
      const z = normalQuantile(p);
      expect(Math.abs(normalCdf(z) - p)).toBeLessThan(8 * DOUBLE_EPSILON * (1 + z * z) * Math.min(p, 1 - p) + DOUBLE_EPSILON);
    }
    for (let k = 1; k <= 15; k++) {
      const p = 1 - 10 ** -k;
      expect(Math.abs(normalCdf(normalQuantile(p)) - p)).toBeLessThan(4 * DOUBLE_EPSILON);
    }
  });

  it('normalCdf(−x) = 1 − normalCdf(x) within 2ε for x in [0, 8]', () => {
    // Exact property: symmetry Φ(−x) = 1 − Φ(x).
    for (let x = 0; x <= 8; x += 0.01) {
      expect(Math.abs(normalCdf(-x) - (1 - normalCdf(x)))).toBeLessThanOrEqual(2 * DOUBLE_EPSILON);
    }
  });

  it('normalCdf(x) handles infinities, NaN and the underflow limit', () => {
    expect(normalCdf(Number.NEGATIVE_INFINITY)).toBe(0);
    expect(normalCdf(Number.POSITIVE_INFINITY)).toBe(1);
    expect(normalCdf(-40)).toBe(0);
    expect(normalCdf(9)).toBe(1);
    expect(normalCdf(Number.NaN)).toBeNaN();
  });
});
