/**
 * estimateTaskMemoryMib, parseMemoryMib: the estimate's exact arithmetic and properties (monotone in
 * every input, a multiple of 256 MiB), and memory sizes read with Slurm's units (the sbatch manual's
 * --mem: default unit megabytes, suffixes K, M, G, T, powers of 1024).
 */
import { describe, expect, it } from 'vitest';
import { estimateTaskMemoryMib, parseMemoryMib, PROCESS_BASE_MIB } from '../../src/cluster/task-memory.js';

describe('estimateTaskMemoryMib', () => {
  it('estimateTaskMemoryMib(inputs) is 1.25·(base + 3·model + 3·rows·elements·4 B) rounded up to 256 MiB', () => {
    const mib = 1024 * 1024;
    // base only: 1.25·512 = 640 → 768
    expect(estimateTaskMemoryMib({ modelBytes: 0, elementsPerStimulus: 0, rows: 0 })).toBe(768);
    // 100 MiB model, 16 rows of 2^20 elements (4 MiB each): 512 + 300 + 192 = 1004; ·1.25 = 1255 → 1280
    expect(estimateTaskMemoryMib({ modelBytes: 100 * mib, elementsPerStimulus: 2 ** 20, rows: 16 })).toBe(1280);
    expect(PROCESS_BASE_MIB).toBe(512);
    let previous = 0;
    for (let rows = 1; rows <= 64; rows *= 2) {
      const value = estimateTaskMemoryMib({ modelBytes: 5e8, elementsPerStimulus: 1.3e7, rows });
      expect(value % 256).toBe(0);
      expect(value).toBeGreaterThanOrEqual(previous);
      previous = value;
    }
    expect(() => estimateTaskMemoryMib({ modelBytes: -1, elementsPerStimulus: 0, rows: 0 })).toThrow(/modelBytes/);
  });
});

describe('parseMemoryMib', () => {
  it('parseMemoryMib(text) reads auto and sizes in K, M (default), G, T', () => {
    expect(parseMemoryMib('auto')).toBeNull();
    expect(parseMemoryMib('1500')).toBe(1500);
    expect(parseMemoryMib('1500M')).toBe(1500);
    expect(parseMemoryMib('8G')).toBe(8192);
    expect(parseMemoryMib('1.5g')).toBe(1536);
    expect(parseMemoryMib('2T')).toBe(2 * 1024 * 1024);
    expect(parseMemoryMib('2048K')).toBe(2);
    expect(parseMemoryMib('8GB')).toBe(8192);
    for (const bad of ['', 'lots', '-1G', '0', '1X']) expect(parseMemoryMib(bad), bad).toBeUndefined();
  });
});
