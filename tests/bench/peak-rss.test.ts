/**
 * The peak resident set benchmarks read in their child processes (PEAK_RSS_KB). Checked against the
 * kernel's documented behaviour: getrusage(2), NOTES — "Resource usage metrics are preserved across an
 * execve(2)" — so a child started by fork and exec reports in maxRSS at least the resident set its parent
 * had when it forked; proc(5) — VmHWM, "Peak resident set size", belongs to the new address space.
 */
import { execFileSync } from 'node:child_process';
import { existsSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { PEAK_RSS_KB } from '../../src/bench/fixtures.js';

const MiB = 1024;

describe.skipIf(!existsSync('/proc/self/status'))('PEAK_RSS_KB', () => {
  it('a child of a process holding 512 MiB reports its own peak (under 256 MiB), where maxRSS carries the parent\'s (over 512 MiB)', () => {
    const held = new Uint8Array(512 * 1024 * 1024).fill(1); // resident in this process when it forks
    const script = `process.stdout.write(JSON.stringify({ own: ${PEAK_RSS_KB}, inherited: process.resourceUsage().maxRSS }));`;
    const out = JSON.parse(execFileSync(process.execPath, ['--input-type=module', '-e', script]).toString()) as { own: number; inherited: number };
    expect(held[held.length - 1]).toBe(1);
    expect(out.inherited).toBeGreaterThan(512 * MiB);
    expect(out.own).toBeLessThan(256 * MiB);
    expect(out.own).toBeGreaterThan(10 * MiB); // a Node.js process holds more than this: the figure is real
  });

  it('counts what the child itself holds: 300 MiB touched in the child shows in its peak', () => {
    const script = `const b = new Uint8Array(300 * 1024 * 1024).fill(2); process.stdout.write(JSON.stringify({ own: ${PEAK_RSS_KB}, last: b[b.length - 1] }));`;
    const out = JSON.parse(execFileSync(process.execPath, ['--input-type=module', '-e', script]).toString()) as { own: number; last: number };
    expect(out.last).toBe(2);
    expect(out.own).toBeGreaterThan(300 * MiB);
  });
});
