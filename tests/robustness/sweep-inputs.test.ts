/**
 * A sweep rerun into an existing --out reuses finished cells only when they were computed from the
 * same inputs (model bytes, baseline manifest, table bytes, task, threshold rule, depth profile). Any
 * difference is refused with the input named and the fix (another --out, or --restart).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { sweepModulations, type SweepOptions } from '../../src/replay/sweep.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let common: Omit<SweepOptions, 'out'>;
const kinds = ['alpha', 'beta'];

beforeAll(async () => {
  dir = tempFolder();
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 5, classes: 2, widths: [4, 4] }));
  writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
  const labels = Array.from({ length: 12 }, (_, i) => kinds[i % 2]!);
  for (const [name, seed] of [['a', 1], ['b', 2]] as const) {
    const folder = join(dir, `stim-${name}`);
    (await import('node:fs')).mkdirSync(folder);
    const stim = writeStimuliNpy(folder, [12, 3, 16, 16], seed, labels);
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, `base-${name}`), batch: 6, threads: 1 });
    await tuneSnapshot({ snapshot: join(dir, `base-${name}`), out: join(dir, `tuning-${name}.arrow`) });
  }
  common = { model, from: join(dir, 'base-a'), sites: ['relu0'], schemes: ['tuning'], strengths: [0, 0.5], task: 'detect:all', tuning: join(dir, 'tuning-a.arrow'), threads: 1 };
});

describe('sweepModulations into an existing --out', () => {
  it('sweepModulations refuses cells of another tuning table, baseline or threshold rule, naming the input; --restart recomputes', async () => {
    const out = join(dir, 'sweep');
    const first = await sweepModulations({ ...common, out });
    const header = JSON.parse(readFileSync(join(out, 'cells.jsonl'), 'utf8').split('\n')[0]!) as { sweepInputs: string };
    expect(header.sweepInputs).toBe(first.inputs!.digest);
    // same inputs: every cell is reused, none is evaluated again
    const again = await sweepModulations({ ...common, out, onProgress: () => { throw new Error('no cell should be evaluated again'); } });
    expect(JSON.stringify(again.cells)).toBe(JSON.stringify(first.cells));
    await expect(sweepModulations({ ...common, out, tuning: join(dir, 'tuning-b.arrow') })).rejects.toThrow(/other inputs: the tuning table \(--tuning\) \(sha256 [0-9a-f]{12}… there, sha256 [0-9a-f]{12}… now\)/);
    await expect(sweepModulations({ ...common, out, from: join(dir, 'base-b') })).rejects.toThrow(/other inputs: the baseline snapshot \(--from\)/);
    await expect(sweepModulations({ ...common, out, threshold: 'best' })).rejects.toThrow(/the threshold rule \("auto" there, "best" now\)/);
    const restarted = await sweepModulations({ ...common, out, tuning: join(dir, 'tuning-b.arrow'), restart: true });
    expect(restarted.inputs!.tuning).not.toBe(first.inputs!.tuning);
    // --restart computes every cell afresh: equal to a sweep with tuning-b into a new folder
    const fresh = await sweepModulations({ ...common, out: join(dir, 'sweep-fresh'), tuning: join(dir, 'tuning-b.arrow') });
    expect(JSON.stringify(restarted.cells)).toBe(JSON.stringify(fresh.cells));
  });

  it('sonde sweep into a folder whose cells.jsonl records no inputs exits 2 with one line naming the fix', async () => {
    const out = join(dir, 'legacy');
    await sweepModulations({ ...common, out });
    const path = join(out, 'cells.jsonl');
    writeFileSync(path, readFileSync(path, 'utf8').split('\n').slice(1).join('\n'));
    const result = await runSonde(['sweep', common.model as string, '--from', common.from as string, '--sites', 'relu0', '--schemes', 'tuning', '--strengths', '0,0.5', '--task', 'detect:all', '--tuning', common.tuning!, '--out', out, '--threads', '1']);
    expect(result.code).toBe(2);
    expect(result.stderr.trim().split('\n')).toHaveLength(1);
    expect(result.stderr).toMatch(/holds 4 cells but no record of the inputs .*new --out folder, or pass --restart/);
  });
});
