/**
 * Runs the built CLI (`bin/sonde …`) as a separate process, for tests that must kill a process or
 * run several at once. `ensureBuilt()` compiles `dist/` first when any source file is newer than it.
 */
import { execFileSync, spawn, type ChildProcess } from 'node:child_process';
import { existsSync, readdirSync, statSync } from 'node:fs';
import { join, resolve } from 'node:path';

/** The repository root. */
export const ROOT = resolve(import.meta.dirname, '..', '..');
const BIN = join(ROOT, 'bin', 'sonde');

function newestSource(folder: string): number {
  let newest = 0;
  for (const entry of readdirSync(folder, { withFileTypes: true })) {
    const path = join(folder, entry.name);
    if (entry.isDirectory()) newest = Math.max(newest, newestSource(path));
    else if (entry.name.endsWith('.ts')) newest = Math.max(newest, statSync(path).mtimeMs);
  }
  return newest;
}

/** Compiles the sources to dist/ when dist/cli/main.js is missing or older than a source file. */
export function ensureBuilt(): void {
  const main = join(ROOT, 'dist', 'cli', 'main.js');
  if (existsSync(main) && statSync(main).mtimeMs >= newestSource(join(ROOT, 'src'))) return;
  try {
    execFileSync(join(ROOT, 'node_modules', '.bin', 'tsc'), ['-p', join(ROOT, 'tsconfig.json')], { cwd: ROOT, stdio: 'pipe' });
  } catch {
    // type errors elsewhere in the tree still emit JavaScript; the run below tells whether it works
  }
}

/**
 * Starts `bin/sonde ARGS` in `cwd` as a user does: its shell lines set malloc's arenas and replace
 * themselves with this Node.js (same pid, so signals reach the recording itself).
 */
export function startSonde(args: readonly string[], cwd = ROOT): ChildProcess {
  return spawn(BIN, args, { cwd, stdio: ['ignore', 'pipe', 'pipe'], env: { ...process.env, SONDE_NODE: process.execPath } });
}

/** Runs `bin/sonde ARGS` to the end. */
export function runSondeProcess(args: readonly string[], cwd = ROOT): Promise<{ code: number | null; signal: NodeJS.Signals | null; stdout: string; stderr: string }> {
  return finished(startSonde(args, cwd));
}

/** Waits for a started process to end and collects its output. */
export function finished(child: ChildProcess): Promise<{ code: number | null; signal: NodeJS.Signals | null; stdout: string; stderr: string }> {
  let stdout = '';
  let stderr = '';
  child.stdout?.on('data', (d: Buffer) => (stdout += d.toString()));
  child.stderr?.on('data', (d: Buffer) => (stderr += d.toString()));
  return new Promise((done) => child.on('close', (code, signal) => done({ code, signal, stdout, stderr })));
}
