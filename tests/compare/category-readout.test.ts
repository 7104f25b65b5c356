/**
 * categoryReadout, categoryColumn and assertSameReadoutMap (src/compare/category-readout.ts). Exact
 * properties: without a map each category is its sidecar unit and its column is that unit's recorded
 * values bit for bit (log-sum-exp of one value); under a map a category's column is the float64
 * log-sum-exp of its units, computed here directly from the recorded values; maps are compared by digest.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { assertSameReadoutMap, categoryColumn, categoryReadout, readoutOf } from '../../src/compare/category-readout.js';
import { readReadoutMap } from '../../src/graph/category-map.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let base: string;
const KINDS = ['cat', 'dog', 'fox', 'owl', 'elk', 'yak'];

beforeAll(async () => {
  const dir = tempFolder('sonde-category-readout-');
  mkdirSync(join(dir, 'm'));
  const model = join(dir, 'm', 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 5, classes: 6 }));
  writeFileSync(join(dir, 'm', 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds: KINDS, threshold: 0.5 } }));
  const stim = writeStimuliNpy(join(dir, 'm'), [8, 3, 16, 16], 4);
  base = join(dir, 'base');
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: base, batch: 4, threads: 1 });
});

describe('categoryReadout', () => {
  it('categoryReadout without a map is the sidecar\'s readout: one unit per kind, its threshold, columns bit for bit the recorded values', async () => {
    const snapshot = openSnapshot(base);
    const readout = categoryReadout(snapshot);
    const old = readoutOf(snapshot);
    expect(readout.layer).toBe(old.layer);
    expect(readout.kinds).toEqual(KINDS);
    expect(readout.threshold).toBe(0.5);
    expect(readout.map).toBeNull();
    expect(readout.unitsOf('fox')).toEqual([2]);
    expect(readout.unitsOf('emu')).toBeNull();
    const raw = await snapshot.readChannelMeans('logits');
    const column = categoryColumn(readout, raw, 8, 'owl');
    for (let i = 0; i < 8; i++) expect(column[i]).toBe(raw[i * 6 + 3]);
    expect(() => categoryColumn(readout, raw, 8, 'emu')).toThrow(/"emu" has no readout unit/);
  });

  it('categoryReadout under a map: the map\'s categories and units (names from the manifest\'s readout), no threshold, columns the float64 log-sum-exp of the units', async () => {
    const snapshot = openSnapshot(base);
    const readout = categoryReadout(snapshot, readReadoutMap('dog=dog,fox;cat=0;big=3..5'));
    expect(readout.kinds).toEqual(['dog', 'cat', 'big']);
    expect(readout.map!.groups).toEqual([[1, 2], [0], [3, 4, 5]]);
    expect(readout.threshold).toBeUndefined();
    const raw = await snapshot.readChannelMeans('logits');
    const big = categoryColumn(readout, raw, 8, 'big');
    for (let i = 0; i < 8; i++) {
      const y = [3, 4, 5].map((u) => raw[i * 6 + u]!);
      const m = Math.max(...y);
      expect(big[i]).toBeCloseTo(m + Math.log(y.reduce((s, v) => s + Math.exp(v - m), 0)), 12);
    }
    expect(() => categoryReadout(snapshot, readReadoutMap('dog=dgo'))).toThrow(/"dgo", which is not a unit of readout "logits".*closest: "dog"/);
  });
});

describe('assertSameReadoutMap', () => {
  it('assertSameReadoutMap passes the same digest (names may differ) and two sides without a map; refuses in one line naming both maps otherwise', () => {
    const a = { name: 'a.json', sha256: 'ab'.repeat(32) };
    expect(() => assertSameReadoutMap({ what: 'X', tag: a }, { what: 'Y', tag: { ...a, name: 'inline' } })).not.toThrow();
    expect(() => assertSameReadoutMap({ what: 'X', tag: null }, { what: 'Y', tag: null })).not.toThrow();
    expect(() => assertSameReadoutMap({ what: '--tuning T', tag: a }, { what: '--sensitivity S', tag: null })).toThrow(/^--tuning T was made under a\.json sha256:abababababab but --sensitivity S under no readout map \(the sidecar's units\); their categories are not scored alike$/);
    expect(() => assertSameReadoutMap({ what: 'X', tag: a }, { what: 'Y', tag: { name: 'a.json', sha256: 'cd'.repeat(32) } })).toThrow(/X was made under a\.json sha256:abab.* but Y under a\.json sha256:cdcd/);
  });
});
