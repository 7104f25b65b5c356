import { describe, expect, it } from 'vitest';
import { stepLog } from '../../src/cli/commands/demo.js';
import { intervalSide } from '../../src/demo/demo.js';

describe('stepLog', () => {
  it('stepLog prints each step\'s own duration when it ends, not the time since the start', () => {
    const lines: string[] = [];
    let clock = 0;
    const log = stepLog((line) => lines.push(line), () => clock);
    log.start('generating displays');
    clock = 2000;
    log.start('recording baselines');
    clock = 2000 + 95_600;
    log.start('sweeping');
    clock += 500;
    log.finish();
    expect(lines).toEqual(['[1] generating displays\n', '[1] done in 2.0 s\n', '[2] recording baselines\n', '[2] done in 1m36s\n', '[3] sweeping\n', '[3] done in 0.5 s\n']);
  });
});

describe('intervalSide', () => {
  it('intervalSide says above, below or includes 0 — an interval entirely below 0 is not "includes 0"', () => {
    expect(intervalSide({ low: 0.001, high: 0.02 })).toBe(' (interval above 0)');
    expect(intervalSide({ low: -0.02, high: -0.001 })).toBe(' (interval below 0)');
    expect(intervalSide({ low: -0.01, high: 0.01 })).toBe(' (interval includes 0)');
  });
});
