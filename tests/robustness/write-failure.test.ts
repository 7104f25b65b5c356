/**
 * Disk-full and write errors: a recording whose writes fail (ENOSPC injected through the sink's test hook,
 * the error a full disk gives write(2)) stops with one line saying the disk is full and that the snapshot
 * stays incomplete; its manifest says complete: false with the error; after the fault is gone `--resume`
 * completes it, equal byte for byte to an undisturbed recording.
 */
import { readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, beforeAll, describe, expect, it } from 'vitest';
import { injectWriteFault } from '../../src/snapshot/arrow-sink.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };

function diskFull(afterBytes: number) {
  let seen = 0;
  injectWriteFault((_path, _offset, length) => {
    seen += length;
    if (seen <= afterBytes) return null;
    return Object.assign(new Error('ENOSPC: no space left on device, write'), { code: 'ENOSPC' });
  });
}

beforeAll(() => {
  dir = tempFolder('sonde-full-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true }));
  stimuli = writeStimuliNpy(dir, [40, 3, 16, 16], 5);
});

afterEach(() => injectWriteFault(null));

const args = (out: string, extra: string[] = []) => ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', out, '--layers', 'all', '--batch', '4', '--threads', '1', '--checkpoint-every', '0', ...extra];

describe('write failures', () => {
  it('sonde record on a full disk exits 1 with one line, leaves the snapshot incomplete, and --resume completes it', async () => {
    const clean = await runSonde(args(join(dir, 'clean')));
    expect(clean.code, clean.stderr).toBe(0);
    const out = join(dir, 'full');
    diskFull(60_000);
    const failed = await runSonde(args(out));
    injectWriteFault(null);
    expect(failed.code).toBe(1);
    expect(failed.stderr.trim().split('\n')).toHaveLength(1);
    expect(failed.stderr).toMatch(/cannot write .*: the disk is full; snapshot .* is left marked incomplete \(.*--resume\)/);
    expect(failed.stderr).not.toMatch(/\n\s+at /);
    const manifest = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { complete: boolean; error: string };
    expect(manifest.complete).toBe(false);
    expect(manifest.error).toMatch(/the disk is full/);
    const check = await runSonde(['check', out]);
    expect(check.code).toBe(1);
    expect(check.stdout).toMatch(/incomplete .*--resume/);
    const resumed = await runSonde(args(out, ['--resume']));
    expect(resumed.code, resumed.stderr).toBe(0);
    for (const name of readdirSync(join(dir, 'clean', 'layers'))) {
      expect(readFileSync(join(out, 'layers', name)).equals(readFileSync(join(dir, 'clean', 'layers', name))), name).toBe(true);
    }
  });

  it('record --modulate --from (downstream replay and full run) stopped by a full disk resumes byte-identical', async () => {
    const base = join(dir, 'clean');
    writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.25\n');
    const modArgs = (out: string, extra: string[] = []) => ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', out, '--modulate', join(dir, 'spec.yaml'), '--from', base, '--batch', '4', '--threads', '1', '--checkpoint-every', '0', ...extra];
    for (const mode of [[], ['--full-run']]) {
      const tag = mode.length ? 'full' : 'tail';
      const clean = await runSonde(modArgs(join(dir, `mod-clean-${tag}`), mode));
      expect(clean.code, clean.stderr).toBe(0);
      expect(clean.stdout).toMatch(mode.length ? /full run/ : /replayed the downstream part/);
      // the disk fills halfway through what the clean run wrote
      const written = (JSON.parse(readFileSync(join(dir, `mod-clean-${tag}`, 'manifest.json'), 'utf8')) as { layers: Array<{ from?: string; bytes?: number }> }).layers.reduce((sum, l) => sum + (l.from ? 0 : l.bytes ?? 0), 0);
      diskFull(written / 2);
      const failed = await runSonde(modArgs(join(dir, `mod-${tag}`), mode));
      injectWriteFault(null);
      expect(failed.code).toBe(1);
      expect(failed.stderr).toMatch(/the disk is full; snapshot .* is left marked incomplete/);
      const resumed = await runSonde(modArgs(join(dir, `mod-${tag}`), [...mode, '--resume']));
      expect(resumed.code, resumed.stderr).toBe(0);
      expect(resumed.stderr).toMatch(/resuming .* after [1-9]\d* of 40 stimuli/);
      for (const name of readdirSync(join(dir, `mod-clean-${tag}`, 'layers'))) {
        expect(readFileSync(join(dir, `mod-${tag}`, 'layers', name)).equals(readFileSync(join(dir, `mod-clean-${tag}`, 'layers', name))), `${tag} ${name}`).toBe(true);
      }
    }
  });

  it('sonde record whose every write fails with EIO names the file and never marks the snapshot complete', async () => {
    const out = join(dir, 'eio');
    injectWriteFault(() => Object.assign(new Error('EIO: i/o error, write'), { code: 'EIO' }));
    const failed = await runSonde(args(out));
    injectWriteFault(null);
    expect(failed.code).toBe(1);
    expect(failed.stderr.trim().split('\n')).toHaveLength(1);
    expect(failed.stderr).toMatch(/cannot write .*\.partial: EIO/);
    expect((JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { complete: boolean }).complete).toBe(false);
  });
});
