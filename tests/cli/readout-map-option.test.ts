/**
 * `--readout-map` end to end through the CLI (src/cli/readout-map-option.ts): a seeded 1000-unit readout
 * and displays labelled with 4 stimulus categories, grouped by a map file (two many-unit categories, a
 * one-unit one and a scattered list), through tune, sense --stimuli-of each, tune --against, sweep,
 * size-matched and diff — no re-recording. The detection figures are checked against an independent
 * computation from the recorded logits: each category's score as the float64 log-sum-exp of its units
 * (the definition), and the ROC area by counting all signal–noise pairs (tests/helpers/pair-auc.ts,
 * the Mann–Whitney definition). The one-line refusals: tables made under different maps, a run under
 * another map than its tables, an unknown unit name.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { tableFromIPC } from 'apache-arrow';
import { beforeAll, describe, expect, it } from 'vitest';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { readSensitivityTable, readTuningTable, READOUT_MAP_KEY } from '../../src/snapshot/tables.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { pairAuc } from '../helpers/pair-auc.js';

const KINDS = ['ring', 'bar', 'disc', 'cross'];
const GROUPS: Record<string, number[]> = {
  ring: Array.from({ length: 118 }, (_, i) => 151 + i),
  bar: [281, 282, 283, 284, 285],
  disc: [7],
  cross: [600, 613, 777, 999],
};
let dir: string;
let model: string;
let map: string;
let fit: string;
let held: string;

/** Labels cycling through the 4 kinds in pairs (so even and odd displays both carry every kind), every third display a second kind. */
function labels(n: number, offset: number): string[] {
  return Array.from({ length: n }, (_, i) => KINDS[(Math.floor(i / 2) + offset) % 4]! + (i % 3 === 0 ? `;${KINDS[(Math.floor(i / 2) + offset + 2) % 4]}` : ''));
}

async function ok(args: string[]): Promise<string> {
  const result = await runSonde(args);
  expect(result.stderr.split('\n').filter((l) => l.startsWith('sonde:')), args.join(' ')).toEqual([]);
  expect(result.code, `${args.join(' ')}\n${result.stderr}`).toBe(0);
  return result.stdout;
}

async function refused(args: string[]): Promise<string> {
  const result = await runSonde(args);
  expect(result.code).toBe(2);
  const lines = result.stderr.trim().split('\n').filter((l) => l.startsWith('sonde:'));
  expect(lines.length).toBe(1);
  return lines[0]!;
}

/** Per category, the float64 log-sum-exp of its units over a [n, 1000] readout. */
function lseColumn(logits: Float32Array, n: number, units: number[]): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let m = -Infinity;
    for (const u of units) m = Math.max(m, logits[i * 1000 + u]!);
    let sum = 0;
    for (const u of units) sum += Math.exp(logits[i * 1000 + u]! - m);
    out[i] = m + Math.log(sum);
  }
  return out;
}

async function expectedAucs(folder: string): Promise<Record<string, number>> {
  const snapshot = openSnapshot(folder);
  const n = snapshot.manifest.stimuli.count;
  const logits = await snapshot.readChannelMeans('logits');
  const out: Record<string, number> = {};
  for (const kind of KINDS) out[kind] = pairAuc(lseColumn(logits, n, GROUPS[kind]!), snapshot.stimuli.labels.map((l) => (l.includes(kind) ? 1 : 0)));
  return out;
}

beforeAll(async () => {
  dir = tempFolder('sonde-readout-map-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 1000 }));
  map = join(dir, 'kinds.json');
  writeFileSync(map, JSON.stringify({ ring: ['151..268'], bar: ['281..285'], disc: 7, cross: [600, 613, 777, 999] }));
  const fitDir = join(dir, 'fit-stimuli');
  const heldDir = join(dir, 'held-stimuli');
  for (const d of [fitDir, heldDir]) (await import('node:fs')).mkdirSync(d);
  const a = writeStimuliNpy(fitDir, [24, 3, 16, 16], 5, labels(24, 0));
  const b = writeStimuliNpy(heldDir, [24, 3, 16, 16], 6, labels(24, 1));
  fit = join(dir, 'fit');
  held = join(dir, 'held');
  await ok(['record', model, '--stimuli', a.npy, '--labels', a.labels, '--out', fit, '--threads', '1']);
  await ok(['record', model, '--stimuli', b.npy, '--labels', b.labels, '--out', held, '--threads', '1']);
}, 120_000);

describe('--readout-map', () => {
  it('tune, sense --stimuli-of each, tune --against, sweep, size-matched and diff run under one map on a 1000-unit readout with 4 categories', async () => {
    const tuning = join(dir, 'tuning.arrow');
    const sens = join(dir, 'sens.arrow');
    await ok(['tune', fit, '--out', tuning, '--readout-map', map]);
    const tuned = readTuningTable(tuning);
    expect(tuned.categories).toEqual(KINDS);
    expect(JSON.parse(tuned.metadata[READOUT_MAP_KEY]!).name).toBe('kinds.json');
    // the map only chooses the categories: the same values as tuning for the labels themselves (summed in another order)
    const plain = join(dir, 'tuning-plain.arrow');
    await ok(['tune', fit, '--out', plain]);
    const unmapped = readTuningTable(plain);
    for (const block of tuned.blocks) {
      const other = unmapped.block(block.layer)!;
      for (let k = 0; k < block.channels; k++) {
        KINDS.forEach((kind, c) => {
          const o = other.categories.indexOf(kind);
          expect(block.tuning[k * 4 + c]).toBeCloseTo(other.tuning[k * other.categories.length + o]!, 12);
        });
      }
    }

    // sharded: two partial tunings under the map merge into the same table, map recorded
    const tuneParts = [1, 2].map((k) => join(dir, `tune-part-${k}.json`));
    for (const [k, part] of tuneParts.entries()) await ok(['tune', fit, '--readout-map', map, '--shard', `${k + 1}/2`, '--partial', part]);
    const mergedTuning = join(dir, 'tuning-merged.arrow');
    await ok(['merge', ...tuneParts, '--out', mergedTuning]);
    const mergedTable = readTuningTable(mergedTuning);
    expect(mergedTable.categories).toEqual(KINDS);
    expect(mergedTable.metadata[READOUT_MAP_KEY]).toBe(tuned.metadata[READOUT_MAP_KEY]);
    for (const block of mergedTable.blocks) {
      const whole = tuned.block(block.layer)!;
      for (let i = 0; i < block.tuning.length; i++) expect(block.tuning[i]).toBeCloseTo(whole.tuning[i]!, 10);
    }

    const senseOut = await ok(['sense', model, '--from', fit, '--sites', 'relu1', '--stimuli-of', 'each', '--readout-map', map, '--out', sens]);
    expect(senseOut).toMatch(/4 categories of logits grouped by readout map/);
    const table = readSensitivityTable(sens);
    expect(table.categories).toEqual(KINDS);
    expect(table.metadata[READOUT_MAP_KEY]).toBe(tuned.metadata[READOUT_MAP_KEY]);
    await ok(['tune', tuning, '--against', sens]);

    const sweepDir = join(dir, 'sweep');
    await ok(['sweep', model, '--from', held, '--sites', 'relu1', '--tuning', tuning, '--sensitivity', sens, '--strengths', '0,0.5', '--task', 'detect:all', '--readout-map', map, '--out', sweepDir, '--threads', '1']);
    const sweep = JSON.parse(readFileSync(join(sweepDir, 'sweep.json'), 'utf8')) as { categories: string[]; cells: Array<{ category: string; strength: number; base: { auc: number }; change: { auc: number } }> };
    expect([...sweep.categories].sort()).toEqual([...KINDS].sort());
    expect((sweep as unknown as { readoutMap: { name: string } }).readoutMap.name).toBe('kinds.json');
    expect(tableFromIPC(readFileSync(join(sweepDir, 'cells.arrow'))).schema.metadata.get(READOUT_MAP_KEY)).toBe(tuned.metadata[READOUT_MAP_KEY]);
    const heldAucs = await expectedAucs(held);
    for (const cell of sweep.cells) {
      expect(cell.base.auc).toBeCloseTo(heldAucs[cell.category]!, 12);
      if (cell.strength === 0) expect(cell.change.auc).toBe(0);
    }

    const comparison = join(dir, 'comparison.json');
    await ok(['size-matched', model, '--fit', fit, '--from', held, '--sites', 'relu1', '--size', '0.1', '--tuning', tuning, '--sensitivity', sens, '--readout-map', map, '--out', comparison, '--resamples', '50', '--threads', '1']);
    const c = JSON.parse(readFileSync(comparison, 'utf8')) as { categories: string[]; baseAuc: number; readoutMap: { name: string } };
    expect(c.readoutMap.name).toBe('kinds.json');
    expect(c.baseAuc).toBeCloseTo(c.categories.reduce((s, k) => s + heldAucs[k]!, 0) / c.categories.length, 12);

    const spec = join(dir, 'gain.yaml');
    writeFileSync(spec, 'site: relu1\nkind: uniform\ngain: 1.3\n');
    const mod = join(dir, 'held-gain');
    const stim = join(dir, 'held-stimuli');
    await ok(['record', model, '--stimuli', join(stim, 'stimuli.npy'), '--labels', join(stim, 'labels.csv'), '--modulate', spec, '--from', held, '--out', mod, '--threads', '1']);
    const report = JSON.parse(await ok(['diff', held, mod, '--task', 'detect:all', '--readout-map', map, '--json', '--bootstrap', '0'])) as { task: { readoutMap: { name: string }; categories: Array<{ category: string; auc: { base: number; mod: number } }> } };
    expect(report.task.readoutMap.name).toBe('kinds.json');
    const modAucs = await expectedAucs(mod);
    expect(report.task.categories.map((t) => t.category).sort()).toEqual([...KINDS].sort());
    for (const t of report.task.categories) {
      // scores stored at float32 like the logits they come from: ties aside, the ranks are the float64 ones
      expect(t.auc.base).toBeCloseTo(heldAucs[t.category]!, 12);
      expect(t.auc.mod).toBeCloseTo(modAucs[t.category]!, 12);
    }
    const text = await ok(['diff', held, mod, '--task', 'detect:ring', '--readout-map', map, '--bootstrap', '0']);
    expect(text).toMatch(/grouped by readout map kinds\.json/);
    // sharded: two partial diffs under the map merge into the same task figures; a shard under another map does not merge
    const parts = [1, 2].map((k) => join(dir, `part-${k}.json`));
    for (const [k, part] of parts.entries()) await ok(['diff', held, mod, '--task', 'detect:all', '--readout-map', map, '--bootstrap', '0', '--shard', `${k + 1}/2`, '--partial', part]);
    const merged = JSON.parse(await ok(['merge', ...parts, '--json'])) as typeof report;
    for (const t of merged.task.categories) expect(t.auc.base).toBeCloseTo(heldAucs[t.category]!, 12);
    expect(merged.task.readoutMap.name).toBe('kinds.json');
    const otherPart = join(dir, 'part-2-other.json');
    await ok(['diff', held, mod, '--task', 'detect:all', '--readout-map', 'ring=151..268;bar=281..285;disc=7;cross=600', '--bootstrap', '0', '--shard', '2/2', '--partial', otherPart]);
    expect(await refused(['merge', parts[0]!, otherPart, '--json'])).toMatch(/comes from another run/);
  }, 240_000);

  it('--readout-map refuses in one line: tables made under different maps, a sweep without the tables\' map, an unknown unit name, a map category no stimulus carries', async () => {
    const tuning = join(dir, 'tuning-a.arrow');
    const sens = join(dir, 'sens-b.arrow');
    await ok(['tune', fit, '--out', tuning, '--readout-map', map]);
    const other = 'ring=151..200;bar=281..285;disc=7;cross=600';
    await ok(['sense', model, '--from', fit, '--sites', 'relu1', '--stimuli-of', 'each', '--readout-map', other, '--out', sens]);
    expect(await refused(['tune', tuning, '--against', sens])).toMatch(/tuning table .*tuning-a\.arrow was made under kinds\.json sha256:[0-9a-f]{12} but --against .*sens-b\.arrow under inline sha256:[0-9a-f]{12}.*same --readout-map/);
    const sweepArgs = ['sweep', model, '--from', held, '--sites', 'relu1', '--tuning', tuning, '--strengths', '0,0.5', '--task', 'detect:all', '--threads', '1'];
    expect(await refused([...sweepArgs, '--sensitivity', sens, '--readout-map', map, '--out', join(dir, 'sw1')])).toMatch(/--tuning .* was made under kinds\.json .* but --sensitivity .* under inline/);
    expect(await refused([...sweepArgs, '--out', join(dir, 'sw2')])).toMatch(/this sweep was made under no readout map .* but --tuning .* under kinds\.json/);
    expect(await refused(['sense', model, '--from', fit, '--sites', 'relu1', '--readout-map', 'ring=151..268;bar=tabby', '--out', join(dir, 's3.arrow')])).toMatch(/category "bar" lists "tabby", which is not a unit of readout "logits" \(1000 units, indices 0–999, no unit names/);
    expect(await refused(['tune', fit, '--out', join(dir, 't4.arrow'), '--readout-map', 'ring=1;star=2'])).toMatch(/category "star" has no stimuli in .*closest: "bar"|category "star" has no stimuli in/);
    expect(await refused(['diff', held, held, '--task', 'detect:all', '--readout-map', 'ring=1..5;bar=5'])).toMatch(/unit 5 is listed for both "ring" and "bar"/);
  }, 120_000);
});
