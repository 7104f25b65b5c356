/**
 * bin/sonde's shell lines (one malloc arena, then Node.js in place of the shell) and src/malloc-arenas.ts,
 * which applies the same rule to processes started from JavaScript. GLIBC_TUNABLES syntax — colon-separated
 * name=value entries, read once at process start — is the GNU C Library manual's, section "Tunables";
 * glibc.malloc.arena_max from the same manual, "Memory Allocation Tunables".
 */
import { execFileSync, spawn } from 'node:child_process';
import { chmodSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { describe, expect, it } from 'vitest';
import { ARENA_TUNABLE, arenaSetting, withSondeMalloc } from '../../src/malloc-arenas.js';
import { ensureBuilt } from '../robustness/cli-process.js';

const ROOT = resolve(import.meta.dirname, '..', '..');
const BIN = join(ROOT, 'bin', 'sonde');

/** A stand-in for Node.js that prints its pid, GLIBC_TUNABLES and arguments, one per line. */
function fakeNode(): string {
  const folder = mkdtempSync(join(tmpdir(), 'sonde-launcher-'));
  const path = join(folder, 'fake-node');
  writeFileSync(path, '#!/bin/sh\necho "$$"\necho "${GLIBC_TUNABLES-<unset>}"\nfor a in "$@"; do printf "[%s]\\n" "$a"; done\n');
  chmodSync(path, 0o755);
  return path;
}

function launch(args: readonly string[], tunables: string | undefined): { pid: number; tunables: string; args: string[] } {
  const env: NodeJS.ProcessEnv = { ...process.env, SONDE_NODE: fakeNode() };
  if (tunables === undefined) delete env['GLIBC_TUNABLES'];
  else env['GLIBC_TUNABLES'] = tunables;
  const [pid, seen, ...rest] = execFileSync(BIN, args, { env }).toString().replace(/\n$/, '').split('\n');
  return { pid: Number(pid), tunables: seen!, args: rest };
}

describe('bin/sonde shell lines', () => {
  const cases: Array<[string | undefined, string]> = [
    [undefined, 'glibc.malloc.arena_max=1'],
    ['', 'glibc.malloc.arena_max=1'],
    ['glibc.malloc.check=0', 'glibc.malloc.check=0:glibc.malloc.arena_max=1'],
    ['glibc.malloc.arena_max=4', 'glibc.malloc.arena_max=4'],
    ['glibc.malloc.hugetlb=1:glibc.malloc.arena_max=2', 'glibc.malloc.hugetlb=1:glibc.malloc.arena_max=2'],
    // a longer name that merely ends the same way is another tunable
    ['x.glibc.malloc.arena_max=8', 'x.glibc.malloc.arena_max=8:glibc.malloc.arena_max=1'],
  ];
  for (const [given, wanted] of cases) {
    it(`GLIBC_TUNABLES ${given === undefined ? 'unset' : JSON.stringify(given)} reaches Node.js as ${JSON.stringify(wanted)}, the same as withSondeMalloc gives child processes`, () => {
      expect(launch(['--version'], given).tunables).toBe(wanted);
      expect(withSondeMalloc(given === undefined ? {} : { GLIBC_TUNABLES: given })['GLIBC_TUNABLES']).toBe(wanted);
    });
  }

  it('passes every argument through unchanged (spaces, empty, quotes, $, globs) after the script path, and replaces itself: Node.js runs under the pid that was started', async () => {
    const args = ['record', 'a b', '', "it's", '$HOME', '*', '--out', 'x"y'];
    const seen = launch(args, undefined);
    expect(seen.args).toEqual([BIN, ...args].map((a) => `[${a}]`));
    // the pid the fake Node.js reports is the pid of the process this test started: no shell stays
    // between, so a signal sent to it (SIGINT, SIGTERM, SIGKILL) reaches the recording itself
    const child = spawn(BIN, ['--version'], { env: { ...process.env, SONDE_NODE: fakeNode() }, stdio: ['ignore', 'pipe', 'inherit'] });
    let out = '';
    child.stdout.on('data', (d: Buffer) => (out += d.toString()));
    await new Promise((done) => child.on('close', done));
    expect(Number(out.split('\n')[0])).toBe(child.pid);
  });

  it('runs the CLI both as a program and as `node bin/sonde`', () => {
    ensureBuilt();
    const version = (JSON.parse(execFileSync('node', ['-p', 'JSON.stringify(require("./package.json").version)'], { cwd: ROOT }).toString()) as string);
    expect(execFileSync(BIN, ['--version'], { env: { ...process.env, SONDE_NODE: process.execPath } }).toString().trim()).toBe(version);
    expect(execFileSync(process.execPath, [BIN, '--version']).toString().trim()).toBe(version);
  });

  it('a missing SONDE_NODE stops with the shell\'s "not found" and status 127, not a syntax error from the lines below', () => {
    let error: { status: number; stderr: Buffer } | null = null;
    try {
      execFileSync(BIN, ['--version'], { env: { ...process.env, SONDE_NODE: '/nonexistent/node' }, stdio: 'pipe' });
    } catch (e) {
      error = e as { status: number; stderr: Buffer };
    }
    expect(error?.status).toBe(127);
    expect(error!.stderr.toString()).toMatch(/\/nonexistent\/node: not found/);
    expect(error!.stderr.toString()).not.toMatch(/[Ss]yntax error/);
  });
});

describe('malloc-arenas', () => {
  it('arenaSetting reads the last glibc.malloc.arena_max entry, undefined where none', () => {
    expect(arenaSetting({})).toBeUndefined();
    expect(arenaSetting({ GLIBC_TUNABLES: 'glibc.malloc.check=0' })).toBeUndefined();
    expect(arenaSetting({ GLIBC_TUNABLES: 'glibc.malloc.arena_max=4' })).toBe('4');
    expect(arenaSetting({ GLIBC_TUNABLES: 'glibc.malloc.arena_max=4:glibc.malloc.arena_max=1' })).toBe('1');
  });

  it('withSondeMalloc adds the entry once, keeps a user\'s own setting, and does not change its input', () => {
    const env = { GLIBC_TUNABLES: 'glibc.malloc.check=0', PATH: '/bin' };
    expect(withSondeMalloc(env)).toEqual({ GLIBC_TUNABLES: `glibc.malloc.check=0:${ARENA_TUNABLE}`, PATH: '/bin' });
    expect(withSondeMalloc(withSondeMalloc(env))).toEqual(withSondeMalloc(env));
    expect(env.GLIBC_TUNABLES).toBe('glibc.malloc.check=0');
    const own = { GLIBC_TUNABLES: 'glibc.malloc.arena_max=8' };
    expect(withSondeMalloc(own)).toEqual(own);
    expect(withSondeMalloc(own)).not.toBe(own);
  });
});
