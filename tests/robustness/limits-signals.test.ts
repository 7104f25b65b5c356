/**
 * Limits and signals: a sweep grid over the documented cell limit is refused with its count before
 * anything is planned; --threads beyond the CPUs this process may use is refused; SIGTERM and SIGINT
 * print one line saying how to continue, write the reason into the manifest and release the lock (so a
 * resume needs no stale-lock takeover) and the resumed recording equals an uninterrupted one byte for
 * byte; two sweeps into one folder cannot both run; file-system failures and values with newlines give
 * exactly one line. Expectations are exact properties (counts, byte equality) or the documented CLI
 * contract (README "Errors", "The folder lock").
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { availableParallelism } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { acquireLock } from '../../src/disk/lock.js';
import { continueHint, oneLine } from '../../src/cli/run.js';
import { parseStrengths } from '../../src/cli/commands/sweep.js';
import { assertSweepSize, MAX_SWEEP_CELLS } from '../../src/replay/sweep.js';
import onnxProto from 'onnx-proto';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, finished, runSondeProcess, startSonde } from './cli-process.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
let base: string;

beforeAll(async () => {
  dir = tempFolder('sonde-limits-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2 }));
  stimuli = writeStimuliNpy(dir, [8, 3, 16, 16]);
  base = join(dir, 'base');
  expect((await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', base, '--layers', 'all', '--batch', '4'])).code).toBe(0);
}, 60_000);

describe('sweep cell limit', () => {
  it('parseStrengths reads start:stop:step, both ends included, and refuses a range written start:step:stop with the reordered range as the fix', () => {
    expect(parseStrengths('0:0.4:0.1')).toEqual([0, 0.1, 0.2, 0.3, 0.4]);
    expect(() => parseStrengths('0:0.1:1')).toThrow(/a range is start:stop:step \(step last\), so this gives only 0/);
    try {
      parseStrengths('0:0.1:1');
    } catch (error) {
      expect((error as { hint?: string }).hint).toBe('for 0 to 1 in steps of 0.1, write --strengths 0:1:0.1');
    }
    expect(() => parseStrengths('1:0:0.1')).toThrow(/gives no strength/);
    expect(parseStrengths('0.5:0.5:0.1')).toEqual([0.5]);
  });

  it('parseStrengths refuses a range with more strengths than the cell limit, counting them without making them', () => {
    expect(() => parseStrengths('0:1:0.0000001')).toThrow(/gives 1\.00e\+7 strengths, more than the 100000 cells a sweep may have/);
    expect(() => parseStrengths('0:1000000000000:1')).toThrow(/gives 1\.00e\+12 strengths, more than the/);
    expect(parseStrengths('0:1:0.25')).toEqual([0, 0.25, 0.5, 0.75, 1]);
  });

  it('assertSweepSize counts sites × categories × strengths × scheme runs (shuffled once per seed) against the limit', () => {
    // 10 × 2 × 1000 × (1 + 1 + 3) = 100 000: exactly the limit passes, one strength more does not
    expect(() => assertSweepSize({ sites: 10, schemes: ['tuning', 'uniform', 'shuffled'], categories: 2, strengths: 1000, seeds: 3 })).not.toThrow();
    expect(MAX_SWEEP_CELLS).toBe(100_000);
    expect(() => assertSweepSize({ sites: 10, schemes: ['tuning', 'uniform', 'shuffled'], categories: 2, strengths: 1001, seeds: 3 })).toThrow(/this sweep has 100100 cells \(10 sites × 2 categories × 1001 strengths × 5 scheme runs\)/);
  });

  it('sweep --strengths 0:1:0.0000001 exits 2 with one line', async () => {
    const result = await runSonde(['sweep', model, '--from', base, '--sites', 'relu1', '--strengths', '0:1:0.0000001', '--task', 'labels', '--out', join(dir, 'huge')]);
    expect(result.code).toBe(2);
    expect(result.stderr.trim().split('\n')).toHaveLength(1);
    expect(result.stderr).toMatch(/strengths, more than the 100000 cells/);
  });
});

describe('--threads bound', () => {
  it('record --threads 999 (more than this machine\'s CPUs) exits 2 naming the bound; the bound itself is accepted', async () => {
    const cores = availableParallelism();
    const over = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 't999'), '--threads', String(cores + 983)]);
    expect(over.code).toBe(2);
    expect(over.stderr).toMatch(new RegExp(`--threads ${cores + 983} is more than the ${cores} CPUs this process may use`));
    expect(existsSync(join(dir, 't999'))).toBe(false);
    const sense = await runSonde(['sense', model, '--from', base, '--site', 'relu1', '--out', join(dir, 's.arrow'), '--threads', String(cores + 1)]);
    expect(sense.code).toBe(2);
    const ok = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'tmax'), '--threads', String(cores), '--batch', '4']);
    expect(ok.code, ok.stderr).toBe(0);
  }, 60_000);
});

describe('sweep lock', () => {
  it('a sweep into a folder another live process is sweeping into is refused, and the folder is left as it was', async () => {
    const out = join(dir, 'locked-sweep');
    mkdirSync(out);
    const lock = acquireLock(out); // held by this (live) process, as a running sweep holds it
    try {
      const second = await runSonde(['sweep', model, '--from', base, '--sites', 'relu1', '--strengths', '0,0.5', '--task', 'labels', '--out', out]);
      expect(second.code).toBe(1);
      expect(second.stderr).toMatch(/sweep folder .*locked-sweep is being written by pid \d+/);
      expect(readdirSync(out)).toEqual(['.lock']);
    } finally {
      lock.release();
    }
    const after = await runSonde(['sweep', model, '--from', base, '--sites', 'relu1', '--strengths', '0,0.5', '--task', 'labels', '--out', out]);
    expect(after.code, after.stderr).toBe(0);
    expect(readdirSync(out)).not.toContain('.lock'); // released at the end
  }, 60_000);
});

describe('one line, whatever the input', () => {
  it('oneLine escapes newlines and control characters; an --out with a newline gives one line', async () => {
    expect(oneLine('a\nb\rc\u0007')).toBe('a\\nb\\rc\\x07');
    const result = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'bad\nname'), '--from', join(dir, 'missing\nbaseline'), '--modulate', join(dir, 'none.yaml')]);
    expect(result.code).not.toBe(0);
    expect(result.stderr.trim().split('\n'), result.stderr).toHaveLength(1);
  });

  it('a folder that cannot be created (a file where a parent folder should be) gives one line naming the path and the reason, no "unexpected error"', async () => {
    // the same path as a read-only disk or a missing permission: an errno error from mkdir, worded by the CLI
    writeFileSync(join(dir, 'plain-file'), 'x');
    const result = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, 'plain-file', 'sub', 'x')]);
    expect(result.code).toBe(1);
    expect(result.stderr.trim().split('\n'), result.stderr).toHaveLength(1);
    expect(result.stderr).not.toMatch(/unexpected error/);
    expect(result.stderr).toMatch(/^sonde: cannot create folder .*plain-file.*: a part of the path is not a folder/);
  });

  it('a model the runtime fails on while running: only Sonde\'s line by default, the runtime\'s coloured log line only with SONDE_RUNTIME_LOG=error', async () => {
    ensureBuilt();
    // Flatten replaced by Reshape to [3, -1]: shape inference passes, the run fails (4 values per row of 2 stimuli)
    const proto = onnxProto.onnx.ModelProto.decode(buildTinyNet({ widths: [4, 4], classes: 2 }));
    const flat = proto.graph!.node!.find((n) => n.opType === 'Flatten')!;
    flat.opType = 'Reshape';
    flat.input = ['gap', 'bad_shape'];
    flat.attribute = [];
    proto.graph!.initializer!.push({ name: 'bad_shape', dims: [2], dataType: 7, rawData: new Uint8Array(new BigInt64Array([3n, -1n]).buffer) });
    const bad = join(dir, 'reshape-fails.onnx');
    writeFileSync(bad, onnxProto.onnx.ModelProto.encode(proto).finish());
    const args = (out: string) => ['record', bad, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', join(dir, out)];
    const quiet = await finished(startSonde(args('rf1')));
    expect(quiet.code).toBe(1);
    expect(quiet.stderr.trim().split('\n'), quiet.stderr).toHaveLength(1);
    expect(quiet.stderr).toMatch(/^sonde: .*Reshape/);
    process.env['SONDE_RUNTIME_LOG'] = 'error';
    let loud;
    try {
      loud = await finished(startSonde(args('rf2')));
    } finally {
      delete process.env['SONDE_RUNTIME_LOG'];
    }
    // the control: the runtime does log this failure itself, it is only kept off the terminal by default
    expect(loud.stderr).toMatch(/\[E:onnxruntime/);
  }, 60_000);

  it('continueHint says how to continue: record resumes, sweep keeps its cells, the rest run again', () => {
    expect(continueHint(['record', 'm.onnx', '--out', 'my run'])).toBe("resume with: sonde record m.onnx --out 'my run' --resume");
    expect(continueHint(['record', 'm.onnx', '--resume'])).toBe('resume with: sonde record m.onnx --resume');
    expect(continueHint(['sweep', 'm.onnx'])).toMatch(/^resume with: sonde sweep m\.onnx \(finished cells are kept\)$/);
    expect(continueHint(['merge', 'a', 'b'])).toBe('run it again: sonde merge a b');
  });
});

describe('signals', () => {
  for (const signal of ['SIGTERM', 'SIGINT'] as const) {
    it(`record interrupted by ${signal}: one line with the resume command, the reason in the manifest, no lock left; --resume then equals an uninterrupted run byte for byte`, async () => {
      ensureBuilt();
      const big = join(dir, `big-${signal}`);
      mkdirSync(big);
      const wide = join(big, 'net.onnx');
      writeFileSync(wide, buildTinyNet({ bias: true, widths: [16, 24, 32], input: [3, 32, 32], seed: 5 }));
      const s = writeStimuliNpy(big, [160, 3, 32, 32], 11);
      const args = (out: string, extra: string[] = []) => ['record', wide, '--stimuli', s.npy, '--labels', s.labels, '--out', out, '--layers', 'all', '--batch', '8', '--threads', '1', '--checkpoint-every', '0', ...extra];
      const out = join(big, 'run');
      const child = startSonde(args(out));
      const done = finished(child);
      // tied to the recording's own progress: signal once a checkpoint exists
      const until = performance.now() + 60_000;
      while (!existsSync(join(out, 'progress.json')) && child.exitCode === null && performance.now() < until) await new Promise((r) => setTimeout(r, 5));
      child.kill(signal);
      const result = await done;
      expect(result.code).toBe(signal === 'SIGTERM' ? 143 : 130);
      expect(result.stderr.trim().split('\n').filter((l) => l.trim() !== ''), result.stderr).toEqual([expect.stringMatching(new RegExp(`^sonde: interrupted by ${signal}; resume with: sonde record .* --resume$`))]);
      const manifest = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { complete: boolean; error?: string };
      expect(manifest.complete).toBe(false);
      expect(manifest.error).toBe(`interrupted by ${signal}`);
      expect(existsSync(join(out, '.lock'))).toBe(false);
      const resumed = await runSondeProcess(args(out, ['--resume']));
      expect(resumed.code, resumed.stderr).toBe(0);
      expect(resumed.stderr).not.toMatch(/stale lock/);
      const clean = join(big, 'clean');
      expect((await runSondeProcess(args(clean))).code).toBe(0);
      for (const name of readdirSync(join(clean, 'layers'))) expect(readFileSync(join(out, 'layers', name)).equals(readFileSync(join(clean, 'layers', name))), name).toBe(true);
      expect(readFileSync(join(out, 'stimuli.arrow')).equals(readFileSync(join(clean, 'stimuli.arrow')))).toBe(true);
    }, 180_000);
  }
});
