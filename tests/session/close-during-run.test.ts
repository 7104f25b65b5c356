/**
 * Closing a network session while a run is still in flight (what an error path does when a write fails
 * during pipelined recording) waits for the run instead of releasing the runtime under it. Releasing an
 * onnxruntime session inside its own run aborts the whole process natively ("terminate called after
 * throwing an instance of 'Napi::Error'"), so each case runs in a child process and must exit 0.
 */
import { spawnSync } from 'node:child_process';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { ensureBuilt, ROOT } from '../robustness/cli-process.js';

beforeAll(() => ensureBuilt());

function closeDuringRun(inWorker: boolean) {
  const script = `
    import { readFileSync } from 'node:fs';
    import { createNetworkSession } from ${JSON.stringify(join(ROOT, 'dist', 'session', 'network-session.js'))};
    const bytes = readFileSync(${JSON.stringify(join(ROOT, 'tests', 'reference', 'fixtures', 'residual.onnx'))});
    let finished = 0;
    for (let i = 0; i < 8; i++) {
      const session = await createNetworkSession(bytes, { threads: 1, inWorker: ${inWorker} });
      const run = session.run({ [session.inputNames[0]]: { data: new Float32Array(32 * 3 * 64 * 64), dims: [32, 3, 64, 64] } });
      await session.close();
      const out = await run;
      if (Object.keys(out).length > 0) finished++;
    }
    console.log('finished ' + finished);`;
  return spawnSync(process.execPath, ['--input-type=module', '-e', script], { encoding: 'utf8', timeout: 120_000 });
}

describe('NetworkSession.close during a run', () => {
  it('close() of a worker session while run() is in flight lets the run finish and the process live', () => {
    const result = closeDuringRun(true);
    expect(result.stderr).not.toMatch(/terminate called/);
    expect(result.status, result.stderr).toBe(0);
    expect(result.stdout.trim()).toBe('finished 8');
  });

  it('close() of an in-process session while run() is in flight lets the run finish', () => {
    const result = closeDuringRun(false);
    expect(result.status, result.stderr).toBe(0);
    expect(result.stdout.trim()).toBe('finished 8');
  });
});
