/**
 * mergeSnapshots on compressed shards (snapshot format 3). Exact property: with deterministic runtime
 * output (`threads: 1`) the merged snapshot's layer files and channel-means files are byte-identical to
 * those of the same recording made in one run with the same codec (the writer cuts the batches the same
 * way and the codecs are deterministic), and `sonde check` finds the merge intact; merging keeps each
 * layer's codec.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { mergeSnapshots } from '../../src/record/merge.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let common: { model: string; stimuli: string; labels: string; layers: string; batch: number; threads: number };

beforeAll(async () => {
  dir = tempFolder('sonde-merge-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 16 }));
  const stim = writeStimuliNpy(dir, [11, 3, 16, 16], 17);
  common = { model, stimuli: stim.npy, labels: stim.labels, layers: 'all', batch: 3, threads: 1 };
  await recordSnapshot({ ...common, out: join(dir, 'whole'), compress: 'zstd' });
  for (const k of [1, 2, 3]) await recordSnapshot({ ...common, out: join(dir, `part${k}`), compress: 'zstd', shard: { index: k, count: 3 } });
}, 60_000);

describe('mergeSnapshots (compressed)', () => {
  it('mergeSnapshots of ZSTD shards writes ZSTD layer files and means files byte-identical to the unsharded ZSTD recording', async () => {
    const merged = await mergeSnapshots({ parts: [3, 1, 2].map((k) => join(dir, `part${k}`)), out: join(dir, 'merged') });
    const whole = openSnapshot(join(dir, 'whole'));
    expect(merged.manifest.layers.map((l) => [l.name, l.compression, l.sha256, l.means?.sha256])).toEqual(whole.manifest.layers.map((l) => [l.name, 'zstd', l.sha256, l.means?.sha256]));
    for (const entry of whole.manifest.layers) {
      expect(readFileSync(join(merged.folder, entry.file)).equals(readFileSync(join(whole.folder, entry.file))), entry.file).toBe(true);
      expect(readFileSync(join(merged.folder, entry.means!.file)).equals(readFileSync(join(whole.folder, entry.means!.file))), entry.means!.file).toBe(true);
    }
    expect((await checkSnapshot(merged.folder)).problems).toEqual([]);
  });
});
