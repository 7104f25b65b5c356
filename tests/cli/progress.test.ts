import { describe, expect, it } from 'vitest';
import { formatDuration } from '../../src/cli/progress.js';
import { acrossSites } from '../../src/cli/commands/sense.js';

describe('formatDuration', () => {
  it('formatDuration rounds whole seconds before splitting them, so no "10m60s" (exact arithmetic)', () => {
    expect(formatDuration(659.6)).toBe('11m00s');
    expect(formatDuration(59.5)).toBe('1m00s');
    expect(formatDuration(44.4)).toBe('44s');
    expect(formatDuration(3599.7)).toBe('1h00m');
    expect(formatDuration(3725)).toBe('1h02m');
    expect(formatDuration(-1)).toBe('–');
    expect(formatDuration(Number.NaN)).toBe('–');
  });
});

describe('acrossSites', () => {
  it('acrossSites counts rows over all sites, so done never exceeds the total and ends equal to it', () => {
    const seen: Array<[number, number, string]> = [];
    const overall = acrossSites({ update: (done, total, detail) => seen.push([done, total, detail ?? '']) }, 3);
    for (const [site, total] of [['a', 100], ['b', 300], ['c', 50]] as const) {
      for (let done = 50; done <= total; done += 50) overall.update({ site, rowsDone: done, rowsTotal: total });
    }
    for (const [done, total] of seen) expect(done).toBeLessThanOrEqual(total);
    expect(seen[seen.length - 1]!.slice(0, 2)).toEqual([450, 450]);
    expect(seen[0]![2]).toBe('a (site 1/3)');
    expect(seen[seen.length - 1]![2]).toBe('c (site 3/3)');
  });
});
