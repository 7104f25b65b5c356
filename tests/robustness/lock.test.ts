/**
 * The writer lock of a snapshot folder: a second writer refuses with one line naming the owner's pid; a
 * lock whose process is gone (process.kill(pid, 0) → ESRCH, POSIX kill(2)) is stale and taken over.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { acquireLock, isStale } from '../../src/snapshot/lock.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, finished, startSonde } from './cli-process.js';

/** The pid of a process that has exited (its number is free again; reuse within the test is unlikely). */
function deadPid(): number {
  const child = spawnSync(process.execPath, ['-e', 'process.stdout.write(String(process.pid))'], { encoding: 'utf8' });
  return Number(child.stdout);
}

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };

beforeAll(() => {
  ensureBuilt();
  dir = tempFolder('sonde-lock-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ widths: [16, 24, 32], input: [3, 32, 32] }));
  stimuli = writeStimuliNpy(dir, [200, 3, 32, 32]);
});

describe('acquireLock', () => {
  it('acquireLock(folder) refuses a second writer, naming the pid, and release() frees it', () => {
    const folder = tempFolder();
    const first = acquireLock(folder);
    expect(JSON.parse(readFileSync(join(folder, '.lock'), 'utf8'))).toMatchObject({ pid: process.pid, host: hostname() });
    expect(() => acquireLock(folder)).toThrow(new RegExp(`being written by pid ${process.pid} on `));
    first.release();
    expect(existsSync(join(folder, '.lock'))).toBe(false);
    acquireLock(folder).release();
  });

  it('acquireLock(folder) takes over the lock of a dead process and says so', () => {
    const folder = tempFolder();
    const pid = deadPid();
    writeFileSync(join(folder, '.lock'), JSON.stringify({ pid, host: hostname(), started: '2020-01-01T00:00:00.000Z' }));
    expect(isStale({ pid, host: hostname(), started: '' })).toBe(true);
    const notices: string[] = [];
    const lock = acquireLock(folder, { onNotice: (t) => notices.push(t) });
    expect(lock.tookOverFrom?.pid).toBe(pid);
    expect(notices).toEqual([expect.stringMatching(new RegExp(`took over the stale lock .*pid ${pid}`))]);
    lock.release();
  });

  it('acquireLock(folder) never judges another host\'s lock stale, and treats a torn lock file as stale', () => {
    const folder = tempFolder();
    writeFileSync(join(folder, '.lock'), JSON.stringify({ pid: deadPid(), host: `${hostname()}-elsewhere`, started: 'x' }));
    expect(() => acquireLock(folder)).toThrow(/being written by pid \d+ on .*-elsewhere/);
    writeFileSync(join(folder, '.lock'), '{"pid": 12');
    acquireLock(folder).release();
  });
});

describe('sonde record with a lock', () => {
  it('sonde record into a folder another record is writing exits 1 naming that pid; the first run completes', async () => {
    const out = join(dir, 'busy');
    const child = startSonde(['record', model, '--stimuli', stimuli.npy, '--out', out, '--batch', '4', '--layers', 'all', '--checkpoint-every', '0']);
    const done = finished(child);
    while (!existsSync(join(out, 'progress.json')) && child.exitCode === null) await new Promise((r) => setTimeout(r, 5));
    const second = await runSonde(['record', model, '--stimuli', stimuli.npy, '--out', out, '--force']);
    const first = await done;
    expect(first.code, first.stderr).toBe(0);
    expect(second.code).toBe(1);
    expect(second.stderr.trim().split('\n')).toHaveLength(1);
    expect(second.stderr).toMatch(new RegExp(`being written by pid ${child.pid} `));
    const manifest = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { complete: boolean; stimuli: { count: number } };
    expect(manifest.complete).toBe(true);
    expect(existsSync(join(out, '.lock'))).toBe(false);
    const check = await runSonde(['check', out]);
    expect(check.code, check.stdout).toBe(0);
  }, 60_000);

  it('sonde record takes over a stale lock with a notice on stderr', async () => {
    const out = join(dir, 'stale');
    mkdirSync(out);
    const pid = deadPid();
    writeFileSync(join(out, '.lock'), JSON.stringify({ pid, host: hostname(), started: '2020-01-01T00:00:00.000Z' }));
    const result = await runSonde(['record', model, '--stimuli', stimuli.npy, '--out', out, '--batch', '50']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stderr).toMatch(new RegExp(`took over the stale lock .*pid ${pid}`));
    expect(existsSync(join(out, '.lock'))).toBe(false);
  });
});
