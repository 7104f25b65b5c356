/**
 * The manifest's `layout` field (exact rules, no outside source): a layout must fit its layer's shape,
 * a manifest without one (older snapshots) reads features on the first axis, and a modulated snapshot
 * whose layer puts its features elsewhere than the baseline's does not pair.
 */
import { cpSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { baselineLayerProblems, layerLayout, readManifest, type SnapshotManifest } from '../../src/snapshot/manifest.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { tempFolder } from '../helpers/onnx-builder.js';

const LAYOUTS = new URL('../reference/fixtures/layouts/', import.meta.url).pathname;
const RELU = '/relu/Relu_output_0'; // [6, 6, 5] per stimulus, channels-last (PyTorch-exported fixture)
let folder: string;

function variant(edit: (m: SnapshotManifest) => void): string {
  const copy = join(tempFolder(), 'copy');
  cpSync(folder, copy, { recursive: true });
  const manifest = JSON.parse(readFileSync(join(copy, 'manifest.json'), 'utf8')) as SnapshotManifest;
  edit(manifest);
  writeFileSync(join(copy, 'manifest.json'), JSON.stringify(manifest));
  return copy;
}

beforeAll(async () => {
  folder = join(tempFolder(), 'nhwc');
  await recordSnapshot({ model: join(LAYOUTS, 'channels-last.onnx'), stimuli: join(LAYOUTS, 'channels-last-inputs.npy'), out: folder, layers: 'all', batch: 2, threads: 1 });
});

describe('readManifest', () => {
  it('readManifest keeps each layer\'s layout, and layerLayout reads a layer without one as features first', () => {
    const manifest = readManifest(folder);
    const relu = manifest.layers.find((l) => l.name === RELU)!;
    expect(relu.layout).toEqual({ kind: 'channels-last', featureAxis: 2, source: 'graph' });
    expect(openSnapshot(folder).layerGeometry(RELU).channels).toBe(5);
    const { layout: _dropped, ...old } = relu;
    expect(layerLayout(old)).toEqual({ kind: 'channels-first', featureAxis: 0, source: 'shape' });
  });

  it('readManifest refuses a layout that does not fit its layer, naming the field', () => {
    const at = (m: SnapshotManifest) => m.layers.findIndex((l) => l.name === RELU);
    const outside = variant((m) => { m.layers[at(m)]!.layout = { kind: 'channels-last', featureAxis: 3, source: 'graph' }; });
    expect(() => readManifest(outside)).toThrow(/layers\[\d+\]\.layout has featureAxis 3, outside shape \[6, 6, 5\]/);
    const badKind = variant((m) => { (m.layers[at(m)]!.layout as unknown as { kind: string }).kind = 'cubes'; });
    expect(() => readManifest(badKind)).toThrow(/layers\[\d+\]\.layout\.kind/);
    const grid = variant((m) => { m.layers[at(m)]!.layout = { kind: 'tokens', featureAxis: 2, source: 'sidecar', grid: { prefix: 1, height: 2, width: 2 } }; });
    expect(() => readManifest(grid)).toThrow(/has a grid of 5 tokens, not 6/);
  });
});

describe('baselineLayerProblems', () => {
  it('baselineLayerProblems names a layer whose features sit on another axis than the baseline\'s', () => {
    const base = readManifest(folder);
    const other = JSON.parse(JSON.stringify(base)) as SnapshotManifest;
    other.layers.find((l) => l.name === RELU)!.layout = { kind: 'channels-first', featureAxis: 0, source: 'sidecar' };
    expect(baselineLayerProblems(other, base)).toContainEqual(expect.stringMatching(/"\/relu\/Relu_output_0" has features on axis 0, the baseline's on axis 2/));
  });
});
