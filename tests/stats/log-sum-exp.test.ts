/**
 * logSumExp, groupScores and groupColumn (src/stats/log-sum-exp.ts). References:
 * - PyTorch's torch.logsumexp in float64 on a seeded 1000-unit readout with rows shifted by ±900, where
 *   a naive exp() over- or underflows (fixture made by tests/stats/fixtures/make_log_sum_exp_fixture.py
 *   with Debian's python3-torch, committed);
 * - the identity LSE(y_G) − LSE(y_all) = log Σ_{u∈G} softmax(y)_u (exact: softmax_u = exp(y_u − LSE(y_all))),
 *   checked against torch.softmax's summed probabilities;
 * - exact properties: LSE of one value is the value bit for bit; LSE(y + c) = LSE(y) + c; LSE of k equal
 *   values v is v + ln k.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { groupColumn, groupScores, logSumExp } from '../../src/stats/log-sum-exp.js';

interface Fixture {
  logits: number[];
  stimuli: number;
  units: number;
  groups: Record<string, number[]>;
  logsumexp: Record<string, number[]>;
  logSummedSoftmax: Record<string, number[]>;
}
const fixture = JSON.parse(readFileSync(join(__dirname, 'fixtures', 'log-sum-exp.json'), 'utf8')) as Fixture;
const names = Object.keys(fixture.groups);

describe('logSumExp', () => {
  it('logSumExp equals torch.logsumexp (float64) within 1e-13 relative, rows shifted by ±900 included', () => {
    const y = Float64Array.from(fixture.logits);
    for (const name of names) {
      for (let i = 0; i < fixture.stimuli; i++) {
        const want = fixture.logsumexp[name]![i]!;
        const got = logSumExp(y, i * fixture.units, fixture.groups[name]!);
        expect(Math.abs(got - want)).toBeLessThanOrEqual(1e-13 * Math.max(1, Math.abs(want)));
      }
    }
  });

  it('logSumExp of a group minus logSumExp of the whole readout is the log of the group\'s summed softmax probability (torch.softmax)', () => {
    const y = Float64Array.from(fixture.logits);
    const all = Array.from({ length: fixture.units }, (_, u) => u);
    for (let i = 0; i < fixture.stimuli; i++) {
      const total = logSumExp(y, i * fixture.units, all);
      for (const name of names) {
        const want = fixture.logSummedSoftmax[name]![i]!;
        expect(logSumExp(y, i * fixture.units, fixture.groups[name]!) - total).toBeCloseTo(want, 9);
      }
    }
  });

  it('logSumExp of one unit is that unit bit for bit; shifting every value by c shifts the score by c; k equal values give v + ln k', () => {
    const values = Float32Array.from([0.1, -3.75, 1e-7, 88.5, -1e30]);
    for (let u = 0; u < values.length; u++) expect(Object.is(logSumExp(values, 0, [u]), values[u]!)).toBe(true);
    const y = [1.5, -2, 0.25, 7];
    const shifted = y.map((v) => v + 1000);
    expect(logSumExp(shifted, 0, [0, 1, 2, 3])).toBeCloseTo(logSumExp(y, 0, [0, 1, 2, 3]) + 1000, 10);
    expect(logSumExp([2.5, 2.5, 2.5, 2.5, 2.5], 0, [0, 1, 2, 3, 4])).toBeCloseTo(2.5 + Math.log(5), 14);
  });

  it('logSumExp: NaN anywhere gives NaN, +Infinity gives +Infinity, all −Infinity gives −Infinity, an empty group −Infinity', () => {
    expect(logSumExp([1, Number.NaN, 2], 0, [0, 1, 2])).toBeNaN();
    expect(logSumExp([1, Number.POSITIVE_INFINITY], 0, [0, 1])).toBe(Number.POSITIVE_INFINITY);
    expect(logSumExp([Number.NEGATIVE_INFINITY, Number.NEGATIVE_INFINITY], 0, [0, 1])).toBe(Number.NEGATIVE_INFINITY);
    expect(logSumExp([1, Number.NEGATIVE_INFINITY], 0, [0, 1])).toBe(1);
    expect(logSumExp([1], 0, [])).toBe(Number.NEGATIVE_INFINITY);
  });
});

describe('groupScores', () => {
  it('groupScores and groupColumn give torch.logsumexp for every row and group, [rows, G] row-major', () => {
    const groups = names.map((n) => fixture.groups[n]!);
    const scores = groupScores(Float32Array.from(fixture.logits), fixture.stimuli, fixture.units, groups);
    names.forEach((name, g) => {
      const column = groupColumn(Float32Array.from(fixture.logits), fixture.stimuli, fixture.units, fixture.groups[name]!);
      for (let i = 0; i < fixture.stimuli; i++) {
        const want = fixture.logsumexp[name]![i]!;
        expect(Math.abs(scores[i * groups.length + g]! - want)).toBeLessThanOrEqual(1e-13 * Math.max(1, Math.abs(want)));
        expect(column[i]).toBe(scores[i * groups.length + g]);
      }
    });
    expect(() => groupScores(new Float32Array(10), 2, 6, groups)).toThrow(RangeError);
  });
});
