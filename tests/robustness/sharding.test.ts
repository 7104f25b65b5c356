/**
 * Sharding end to end: 4 shards recorded by 4 separate processes (`record --shard K/4`), merged, equal a
 * single recording byte for byte (exact property: the merge re-cuts batches exactly as the single run cut
 * them, and `--threads 1` makes the runtime deterministic); diff and tune on the merged snapshots equal
 * those on the single ones; partial statistics of 4 shard processes merge to the single run's report
 * (up to rounding: pooled sums combine by exact formulas, compared at 1e-9 relative).
 */
import { readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readSensitivityTable, readTuningTable } from '../../src/snapshot/tables.js';
import { shardRange } from '../../src/record/shard.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, runSondeProcess } from './cli-process.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
let spec: string;
const N = 103; // not a multiple of 4 nor of the batch size, so shard and batch boundaries disagree

function record(out: string, extra: string[] = []): string[] {
  // a modulated run records its baseline's layers; a baseline records all
  const layers = extra.includes('--modulate') ? [] : ['--layers', 'all'];
  return ['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', out, ...layers, '--batch', '8', '--threads', '1', ...extra];
}

function files(folder: string): Map<string, Buffer> {
  const map = new Map<string, Buffer>([['stimuli.arrow', readFileSync(join(folder, 'stimuli.arrow'))]]);
  for (const name of readdirSync(join(folder, 'layers'))) map.set(`layers/${name}`, readFileSync(join(folder, 'layers', name)));
  return map;
}

function manifest(folder: string): Record<string, unknown> {
  const m = JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as Record<string, unknown> & { run: Record<string, unknown> };
  const { created: _c, baseline: _b, ...rest } = m;
  const { wallSeconds: _w, ...run } = m.run;
  return { ...rest, run };
}

/** Drops the keys that name folders (they differ by construction). */
function withoutFolders(value: unknown): unknown {
  if (Array.isArray(value)) return value.map(withoutFolders);
  if (value && typeof value === 'object') return Object.fromEntries(Object.entries(value).filter(([k]) => k !== 'folder').map(([k, v]) => [k, withoutFolders(v)]));
  return value;
}

/** Every number of `got` within `relative` of `want` (absolute 1e-12 near zero); everything else equal. */
function expectClose(got: unknown, want: unknown, relative: number, path = '$'): void {
  if (typeof want === 'number' && typeof got === 'number') {
    if (Number.isNaN(want)) return expect(Number.isNaN(got), path).toBe(true);
    expect(Math.abs(got - want), `${path}: ${got} vs ${want}`).toBeLessThanOrEqual(relative * Math.abs(want) + 1e-12);
    return;
  }
  if (Array.isArray(want)) {
    expect(Array.isArray(got) && got.length === want.length, path).toBe(true);
    want.forEach((w, i) => expectClose((got as unknown[])[i], w, relative, `${path}[${i}]`));
    return;
  }
  if (want && typeof want === 'object') {
    expect(Object.keys(got as object).sort(), path).toEqual(Object.keys(want).sort());
    for (const [k, w] of Object.entries(want)) expectClose((got as Record<string, unknown>)[k], w, relative, `${path}.${k}`);
    return;
  }
  expect(got, path).toEqual(want);
}

beforeAll(async () => {
  ensureBuilt();
  dir = tempFolder('sonde-shard-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2, seed: 9 }));
  stimuli = writeStimuliNpy(dir, [N, 3, 16, 16], 21);
  spec = join(dir, 'gain.json');
  writeFileSync(spec, JSON.stringify({ site: 'relu1', kind: 'uniform', gain: 1.3 }));
  const single = await runSondeProcess(record(join(dir, 'single')));
  expect(single.code, single.stderr).toBe(0);
  const singleMod = await runSondeProcess(record(join(dir, 'single-mod'), ['--modulate', spec, '--from', join(dir, 'single')]));
  expect(singleMod.code, singleMod.stderr).toBe(0);
}, 240_000);

describe('record --shard K/N and merge', () => {
  it('shardRange(k, n, count) splits 0..count-1 into disjoint, covering, balanced ranges', () => {
    // exact property of floor((k-1)·count/n) .. floor(k·count/n)
    for (const [n, count] of [[1, 5], [4, 103], [7, 7], [8, 1000], [3, 2 ** 40]] as const) {
      let next = 0;
      for (let k = 1; k <= n; k++) {
        const { start, end } = shardRange(k, n, count);
        expect(start).toBe(next);
        expect(end - start).toBeGreaterThanOrEqual(Math.floor(count / n));
        expect(end - start).toBeLessThanOrEqual(Math.ceil(count / n));
        next = end;
      }
      expect(next).toBe(count);
    }
    expect(() => shardRange(5, 4, 100)).toThrow(/between 1 and N/);
    expect(() => shardRange(1, 4, 3)).toThrow(/cannot be split into 4 non-empty shards/);
  });

  it('record --shard K/4 in 4 processes, merged, equals a single recording byte for byte (baseline and modulated)', async () => {
    const shards = [1, 2, 3, 4].map((k) => join(dir, `shard${k}`));
    const recorded = await Promise.all(shards.map((out, i) => runSondeProcess(record(out, ['--shard', `${i + 1}/4`]))));
    recorded.forEach((r) => expect(r.code, r.stderr).toBe(0));
    expect(recorded[1]!.stdout).toMatch(/shard 2\/4: 26 stimuli/);
    // modulated shards from the baseline shards (the shard is taken from the baseline)
    const mods = [1, 2, 3, 4].map((k) => join(dir, `mod${k}`));
    const modded = await Promise.all(mods.map((out, i) => runSondeProcess(record(out, ['--modulate', spec, '--from', shards[i]!]))));
    modded.forEach((r) => expect(r.code, r.stderr).toBe(0));
    // merge in scrambled order: the shard numbers decide the order
    const merged = await runSonde(['merge', shards[2]!, shards[0]!, shards[3]!, shards[1]!, '--out', join(dir, 'merged')]);
    expect(merged.code, merged.stderr).toBe(0);
    expect(merged.stdout).toMatch(/merged 4 shards .* 103 stimuli/);
    const mergedMod = await runSonde(['merge', ...mods, '--out', join(dir, 'merged-mod'), '--baseline', join(dir, 'merged')]);
    expect(mergedMod.code, mergedMod.stderr).toBe(0);
    for (const [a, b] of [['merged', 'single'], ['merged-mod', 'single-mod']] as const) {
      const got = files(join(dir, a));
      const want = files(join(dir, b));
      expect([...got.keys()].sort()).toEqual([...want.keys()].sort());
      for (const [name, bytes] of want) expect(got.get(name)!.equals(bytes), `${a}/${name}`).toBe(true);
      expect(manifest(join(dir, a))).toEqual(manifest(join(dir, b)));
    }
    // upstream layers are referenced from the merged baseline, as the tail replay references them
    const modManifest = JSON.parse(readFileSync(join(dir, 'merged-mod', 'manifest.json'), 'utf8')) as { layers: Array<{ from?: string }>; baseline: { path: string } };
    expect(modManifest.layers.filter((l) => l.from === 'baseline').length).toBeGreaterThan(0);
    expect(modManifest.baseline.path).toBe('../merged');
    for (const folder of ['merged', 'merged-mod', 'mod3']) {
      const checked = await runSonde(['check', join(dir, folder)]);
      expect(checked.code, checked.stdout + checked.stderr).toBe(0);
    }
  }, 180_000);

  it('record --shard K/3 merged equals a single recording byte for byte with --dtype float16, --keep channels, and a seeded noise modulation', async () => {
    // float16 values keep their bits through the merge; channel-means-only files re-cut the same way;
    // noise is drawn per (seed, site, global stimulus index), so a shard draws what the single run draws
    const noise = join(dir, 'noise.json');
    writeFileSync(noise, JSON.stringify({ site: 'relu1', kind: 'noise', sd: 0.2, seed: 5 }));
    const variants: Array<[string, string[], string[]]> = [
      ['f16', ['--dtype', 'float16'], []],
      ['ch', ['--keep', 'channels'], []],
      ['noise', ['--modulate', noise, '--full-run'], ['--layers', 'all']],
    ];
    for (const [name, extra, layers] of variants) {
      const single = await runSondeProcess([...record(join(dir, `${name}-single`), extra), ...layers]);
      expect(single.code, single.stderr).toBe(0);
      const shards = [1, 2, 3].map((k) => join(dir, `${name}-shard${k}`));
      const recorded = await Promise.all(shards.map((out, i) => runSondeProcess([...record(out, [...extra, '--shard', `${i + 1}/3`]), ...layers])));
      recorded.forEach((r) => expect(r.code, r.stderr).toBe(0));
      const merged = await runSonde(['merge', ...shards, '--out', join(dir, `${name}-merged`)]);
      expect(merged.code, merged.stderr).toBe(0);
      const got = files(join(dir, `${name}-merged`));
      const want = files(join(dir, `${name}-single`));
      expect([...got.keys()].sort(), name).toEqual([...want.keys()].sort());
      for (const [file, bytes] of want) expect(got.get(file)!.equals(bytes), `${name}: ${file}`).toBe(true);
      expect(manifest(join(dir, `${name}-merged`)), name).toEqual(manifest(join(dir, `${name}-single`)));
    }
  }, 240_000);

  it('diff and tune on the merged snapshots equal diff and tune on the single recording', async () => {
    const args = (base: string, mod: string) => ['diff', join(dir, base), join(dir, mod), '--json', '--bootstrap', '200', '--task', 'labels', '--threshold', 'best'];
    const a = await runSonde(args('merged', 'merged-mod'));
    const b = await runSonde(args('single', 'single-mod'));
    expect(a.code, a.stderr).toBe(0);
    expect(b.code, b.stderr).toBe(0);
    expect(withoutFolders(JSON.parse(a.stdout))).toEqual(withoutFolders(JSON.parse(b.stdout)));
    const ta = await runSonde(['tune', join(dir, 'merged'), '--out', join(dir, 'tm.arrow'), '--json']);
    const tb = await runSonde(['tune', join(dir, 'single'), '--out', join(dir, 'ts.arrow'), '--json']);
    expect(ta.code, ta.stderr).toBe(0);
    expect(withoutFolders({ ...JSON.parse(ta.stdout), snapshot: null, out: null })).toEqual(withoutFolders({ ...JSON.parse(tb.stdout), snapshot: null, out: null }));
    expect(readTuningTable(join(dir, 'tm.arrow')).blocks).toEqual(readTuningTable(join(dir, 'ts.arrow')).blocks);
  });

  it('diff, tune and sense --shard K/4 --partial merge to the single-run results', async () => {
    const diffParts = [1, 2, 3, 4].map((k) => join(dir, `d${k}.json`));
    const tuneParts = [1, 2, 3, 4].map((k) => join(dir, `t${k}.json`));
    // in-process (the shard recordings above are the separate processes); each call is one shard's job
    const runs = [];
    for (const job of [
      ...diffParts.map((p, i) => ['diff', join(dir, 'single'), join(dir, 'single-mod'), '--bootstrap', '200', '--task', 'labels', '--threshold', 'best', '--shard', `${i + 1}/4`, '--partial', p]),
      ...tuneParts.map((p, i) => ['tune', join(dir, 'single'), '--shard', `${i + 1}/4`, '--partial', p]),
    ]) runs.push(await runSonde(job));
    runs.forEach((r) => expect(r.code, r.stderr).toBe(0));
    const merged = await runSonde(['merge', ...diffParts.reverse(), '--json']);
    expect(merged.code, merged.stderr).toBe(0);
    const whole = await runSonde(['diff', join(dir, 'single'), join(dir, 'single-mod'), '--json', '--bootstrap', '200', '--task', 'labels', '--threshold', 'best']);
    expectClose(withoutFolders(JSON.parse(merged.stdout)), withoutFolders(JSON.parse(whole.stdout)), 1e-9);
    const tuned = await runSonde(['merge', ...tuneParts, '--out', join(dir, 'tp.arrow')]);
    expect(tuned.code, tuned.stderr).toBe(0);
    const got = readTuningTable(join(dir, 'tp.arrow')).blocks;
    const want = readTuningTable(join(dir, 'ts.arrow')).blocks;
    expectClose(got.map((b) => ({ ...b, mean: Array.from(b.mean), sem: Array.from(b.sem), tuning: Array.from(b.tuning) })), want.map((b) => ({ ...b, mean: Array.from(b.mean), sem: Array.from(b.sem), tuning: Array.from(b.tuning) })), 1e-9);
    // sense: 4 shard processes of readout sums, merged, equal one run (sums added in another order: 1e-9)
    const senseParts = [1, 2, 3, 4].map((k) => join(dir, `s${k}.json`));
    const senseArgs = ['sense', model, '--from', join(dir, 'single'), '--site', 'relu1', '--readout', 'logits', '--threads', '1'];
    const sensed = [];
    for (const [i, p] of senseParts.entries()) sensed.push(await runSonde([...senseArgs, '--shard', `${i + 1}/4`, '--partial', p]));
    sensed.forEach((r) => expect(r.code, r.stderr).toBe(0));
    const senseMerged = await runSonde(['merge', ...senseParts, '--out', join(dir, 'sm.arrow')]);
    expect(senseMerged.code, senseMerged.stderr).toBe(0);
    const senseWhole = await runSonde([...senseArgs, '--out', join(dir, 'sw.arrow')]);
    expect(senseWhole.code, senseWhole.stderr).toBe(0);
    const plain = (blocks: ReturnType<typeof readSensitivityTable>['blocks']) => blocks.map((b) => ({ ...b, sensitivity: Array.from(b.sensitivity), fdError: Array.from(b.fdError), count: Array.from(b.count) }));
    expectClose(plain(readSensitivityTable(join(dir, 'sm.arrow')).blocks), plain(readSensitivityTable(join(dir, 'sw.arrow')).blocks), 1e-9);
    // a missing shard and a foreign part are refused with one line
    const missing = await runSonde(['merge', ...diffParts.slice(1)]);
    expect(missing.code).toBe(2);
    expect(missing.stderr).toMatch(/shard \d\/4 missing/);
    const mixed = await runSonde(['merge', diffParts[0]!, tuneParts[1]!]);
    expect(mixed.code).toBe(2);
    expect(mixed.stderr).toMatch(/partial tune statistics|partial diff statistics/);
  }, 180_000);
});
