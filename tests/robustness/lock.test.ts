/**
 * The writer lock of a snapshot folder: a second writer refuses with one line naming the owner's pid; a
 * lock whose process is gone (process.kill(pid, 0) → ESRCH, POSIX kill(2)) is stale and taken over.
 */
import { spawn, spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, readFileSync, utimesSync, writeFileSync } from 'node:fs';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { acquireLock, isStale, LOCK_GRACE_MS } from '../../src/disk/lock.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, ROOT } from './cli-process.js';

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

  it('acquireLock(folder) never judges another host\'s lock stale', () => {
    const folder = tempFolder();
    writeFileSync(join(folder, '.lock'), JSON.stringify({ pid: deadPid(), host: `${hostname()}-elsewhere`, started: 'x' }));
    expect(() => acquireLock(folder)).toThrow(/being written by pid \d+ on .*-elsewhere/);
  });

  it('acquireLock(folder) holds an empty or torn lock file as taken while it is young, and takes it over once older than the grace period', () => {
    for (const content of ['', '{"pid": 12']) {
      const folder = tempFolder();
      const path = join(folder, '.lock');
      // a writer between creating the file (O_EXCL) and writing its owner leaves exactly this
      writeFileSync(path, content);
      expect(() => acquireLock(folder)).toThrow(/lock file that is empty or unreadable and \d+ s old: another process may be taking the lock/);
      expect(readFileSync(path, 'utf8')).toBe(content); // not removed
      // the same file, last written longer ago than the grace period (its mtime set back, no waiting)
      const past = new Date(Date.now() - LOCK_GRACE_MS - 5000);
      utimesSync(path, past, past);
      const notices: string[] = [];
      const lock = acquireLock(folder, { onNotice: (t) => notices.push(t) });
      expect(lock.owner.pid).toBe(process.pid);
      expect(notices[0]).toMatch(/took over the stale lock .*unreadable lock file/);
      lock.release();
    }
  });
});

describe('sonde record with a lock', () => {
  it('sonde record into a folder another process holds exits 1 naming its pid; once that process is killed the lock is taken over', async () => {
    const out = join(dir, 'busy');
    mkdirSync(out, { recursive: true });
    // a separate process takes the lock the way a recording does, and keeps it
    const holder = spawn(process.execPath, ['--input-type=module', '-e', `import { acquireLock } from ${JSON.stringify(join(ROOT, 'dist', 'disk', 'lock.js'))}; acquireLock(${JSON.stringify(out)}); console.log('locked'); setTimeout(() => {}, 60000);`], { stdio: ['ignore', 'pipe', 'inherit'] });
    await new Promise<void>((done) => holder.stdout!.once('data', () => done()));
    const refused = await runSonde(['record', model, '--stimuli', stimuli.npy, '--out', out, '--batch', '50']);
    expect(refused.code).toBe(1);
    expect(refused.stderr.trim().split('\n')).toHaveLength(1);
    expect(refused.stderr).toMatch(new RegExp(`being written by pid ${holder.pid} on `));
    expect(existsSync(join(out, 'manifest.json'))).toBe(false);
    holder.kill('SIGKILL');
    await new Promise((done) => holder.once('close', done));
    const after = await runSonde(['record', model, '--stimuli', stimuli.npy, '--out', out, '--batch', '50']);
    expect(after.code, after.stderr).toBe(0);
    expect(after.stderr).toMatch(new RegExp(`took over the stale lock .*pid ${holder.pid}`));
    expect((JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { complete: boolean }).complete).toBe(true);
    expect(existsSync(join(out, '.lock'))).toBe(false);
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

describe('sonde record after an early kill', () => {
  it('sonde record --resume into a folder a killed run left with only a stale lock and an empty layers/ starts afresh', async () => {
    const out = join(dir, 'early');
    mkdirSync(join(out, 'layers'), { recursive: true });
    writeFileSync(join(out, '.lock'), JSON.stringify({ pid: deadPid(), host: hostname(), started: 'then' }));
    const result = await runSonde(['record', model, '--stimuli', stimuli.npy, '--out', out, '--batch', '50', '--resume']);
    expect(result.code, result.stderr).toBe(0);
    expect((JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { complete: boolean }).complete).toBe(true);
  });
});
