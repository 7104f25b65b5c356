/**
 * vitest global set-up: every temporary file and folder the tests make (`os.tmpdir()`, also in the
 * child processes they start) goes under one folder of this run, removed when the run ends, so that
 * repeated runs do not fill the disk with what a test forgot to delete.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

export default function setup(): () => void {
  const before = process.env['TMPDIR'];
  const run = mkdtempSync(join(tmpdir(), 'sonde-tests-'));
  process.env['TMPDIR'] = run;
  return () => {
    if (before === undefined) delete process.env['TMPDIR'];
    else process.env['TMPDIR'] = before;
    rmSync(run, { recursive: true, force: true });
  };
}
