/**
 * The streaming diff reads each channel along the layer's layout. Exact property (no outside source
 * needed): a gain g_c on channel c multiplies that channel's mean by g_c, so the ratio of channel means
 * (modulated / baseline) is g_c wherever the baseline mean is positive. Checked at the ReLU of a
 * channels-last stretch (fixtures/layouts/channels-last.onnx, written by make_layout_fixtures.py from
 * PyTorch: [H, W, C] after a permute to NHWC, ReLU ≥ 0), where reading runs of H·W elements as channels —
 * the channels-first rule — would mix channels.
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { tempFolder } from '../helpers/onnx-builder.js';

const LAYOUTS = new URL('../reference/fixtures/layouts/', import.meta.url).pathname;

describe('diffSnapshots on a channels-last layer', () => {
  it('diffSnapshots: channel ratios at a gained [H, W, C] ReLU are the gains, read along the feature axis', async () => {
    const dir = tempFolder();
    const model = join(LAYOUTS, 'channels-last.onnx');
    const stimuli = join(LAYOUTS, 'channels-last-inputs.npy');
    const relu = '/relu/Relu_output_0';
    await recordSnapshot({ model, stimuli, out: join(dir, 'base'), layers: 'all', batch: 2, threads: 1 });
    const gains = [0.5, 1.5, 1, 2, 0.25];
    writeFileSync(join(dir, 'gain.json'), JSON.stringify({ site: relu, kind: 'gain', values: gains }));
    await recordModulated({ model, stimuli, out: join(dir, 'mod'), modulate: join(dir, 'gain.json'), from: join(dir, 'base'), threads: 1 });
    const report = await diffSnapshots({ base: join(dir, 'base'), mod: join(dir, 'mod') });
    const row = report.layers.find((l) => l.name === relu)!;
    expect(row.signedLayer).toBe(false);
    const mean = gains.reduce((a, b) => a + b, 0) / gains.length;
    const sd = Math.sqrt(gains.reduce((s, g) => s + (g - mean) ** 2, 0) / (gains.length - 1));
    expect(row.channelRatioMean).toBeCloseTo(mean, 5);
    expect(row.channelRatioSd).toBeCloseTo(sd, 4);
  });
});
