/**
 * Modulation at token tensors against PyTorch forward hooks, on the small seeded torchvision
 * VisionTransformer (fixtures/attention/vit-opset14.onnx; references written by
 * tests/reference/make_token_fixtures.py with Debian's python3-torch, float64): a per-feature gain on a
 * block's output, a per-head gain and a head lesion on the attention output before the output
 * projection (viewed as heads), and a token-selective gain. Error measure: max |sonde − torch| /
 * max |torch| over the logits, limit 1e-4 (issue contract). The token selection is also checked as an
 * exact property at the site: the tokens not chosen are bit for bit the baseline's.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { openSnapshot, type Snapshot } from '../../src/snapshot/snapshot.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { tempFolder } from '../helpers/onnx-builder.js';
import { maxRelativeError } from '../helpers/max-relative-error.js';

const FOLDER = new URL('./fixtures/attention/', import.meta.url).pathname;
const TOKENS = join(FOLDER, 'tokens');
const MODEL = join(FOLDER, 'vit-opset14.onnx');
const INPUTS = join(FOLDER, 'inputs.npy');
const INDEX = JSON.parse(readFileSync(join(TOKENS, 'index.json'), 'utf8')) as { block0: string; attention1: string; heads: number };

function npy(path: string): Float64Array {
  const data = parseNpy(readFileSync(path), path).data;
  return Float64Array.from(data as ArrayLike<number>);
}

async function layerValues(snap: Snapshot, name: string): Promise<Float32Array> {
  const { elements } = snap.layerGeometry(name);
  const out = new Float32Array(snap.manifest.stimuli.count * elements);
  for await (const batch of snap.readLayer(name)) out.set(batch.activation!, batch.index[0]! * elements);
  return out;
}


describe('recordModulated at token tensors vs PyTorch hooks (small seeded VisionTransformer)', () => {
  const dir = tempFolder();
  const base = join(dir, 'base');
  let baseline: Snapshot;
  beforeAll(async () => {
    await recordSnapshot({ model: MODEL, stimuli: INPUTS, out: base, layers: 'all', batch: 2, threads: 1 });
    baseline = openSnapshot(base);
  });

  async function modulatedLogits(name: string, spec: object, fullRun = false): Promise<{ logits: Float32Array; snap: Snapshot; mode: string }> {
    const path = join(dir, `${name}.json`);
    writeFileSync(path, JSON.stringify(spec));
    const result = await recordModulated({ model: MODEL, stimuli: INPUTS, out: join(dir, name), modulate: path, from: base, threads: 1, fullRun });
    const snap = openSnapshot(result.folder);
    return { logits: await layerValues(snap, 'logits'), snap, mode: result.manifest.run.mode };
  }

  it('recordSnapshot(vit) logits match PyTorch within 1e-4 (the fixtures and the ONNX file hold the same weights)', async () => {
    expect(maxRelativeError(await layerValues(baseline, 'logits'), npy(join(TOKENS, 'logits.npy')))).toBeLessThanOrEqual(1e-4);
  });

  it('recordModulated(per-feature gain on block 0 output [N, 17, 16]) matches a hook multiplying that output by g[f], with tail replay', async () => {
    const values = Array.from(npy(join(TOKENS, 'feature_gain.npy')));
    const { logits, mode } = await modulatedLogits('feature', { site: INDEX.block0, kind: 'gain', values });
    expect(mode).toBe('tail');
    const want = npy(join(TOKENS, 'logits_feature_gain.npy'));
    expect(maxRelativeError(logits, want)).toBeLessThanOrEqual(1e-4);
    // and the gain did something: far from the unmodulated logits
    expect(maxRelativeError(logits, npy(join(TOKENS, 'logits.npy')))).toBeGreaterThan(1e-2);
  });

  it('recordModulated(per: head gain on the attention output before the output projection) matches a hook on that output viewed as heads (heads traced from the graph)', async () => {
    const values = Array.from(npy(join(TOKENS, 'head_gain.npy')));
    expect(values).toHaveLength(INDEX.heads);
    const { logits, snap } = await modulatedLogits('heads', { site: INDEX.attention1, kind: 'gain', per: 'head', values });
    expect(maxRelativeError(logits, npy(join(TOKENS, 'logits_head_gain.npy')))).toBeLessThanOrEqual(1e-4);
    const record = (snap.manifest.modulation as { modulations: Array<{ details: Record<string, unknown>; gain: number[] }> }).modulations[0]!;
    expect(record.details).toMatchObject({ per: 'head', headCount: 2 });
    // head h covers features 8h … 8h + 7 of the 16
    expect(record.gain).toEqual([...new Array(8).fill(Math.fround(1.75)), ...new Array(8).fill(Math.fround(0.4))]);
    // the whole network with the shared [1, D] gain gives the same logits as the tail replay
    const full = await modulatedLogits('heads-full', { site: INDEX.attention1, kind: 'gain', per: 'head', values }, true);
    expect(full.mode).toBe('full');
    expect(maxRelativeError(full.logits, logits)).toBeLessThanOrEqual(1e-6);
  });

  it('recordModulated(lesion heads: [0]) matches a hook zeroing head 0 of the attention output', async () => {
    const { logits, snap } = await modulatedLogits('lesion', { site: INDEX.attention1, kind: 'lesion', heads: [0] });
    expect(maxRelativeError(logits, npy(join(TOKENS, 'logits_head_lesion.npy')))).toBeLessThanOrEqual(1e-4);
    // the site is not recordable, yet diff places it: after block 1's first layer norm, before its attention output
    const report = await diffSnapshots({ base: baseline, mod: snap });
    const row = (suffix: string) => report.layers.find((l) => l.name.endsWith(suffix))!;
    expect(row('encoder_layer_1/ln_1/Add_1_output_0').downstream).toBe(false);
    expect(row('encoder_layer_1/self_attention/Transpose_5_output_0').downstream).toBe(true);
    expect(row('encoder_layer_1/self_attention/Transpose_5_output_0').belowSite).toBe(1); // the output projection
  });

  it('recordModulated(tokens: [class, [1, 2]]) matches a hook scaling those tokens, and leaves every other token of the site bit for bit', async () => {
    const { logits, snap } = await modulatedLogits('tokens', { site: INDEX.block0, kind: 'uniform', gain: 2.5, tokens: ['class', [1, 2]] });
    expect(maxRelativeError(logits, npy(join(TOKENS, 'logits_token_gain.npy')))).toBeLessThanOrEqual(1e-4);
    const before = await layerValues(baseline, INDEX.block0);
    const after = await layerValues(snap, INDEX.block0);
    const T = 17;
    const D = 16;
    const chosen = new Set([0, 1 + 1 * 4 + 2]);
    let changed = 0;
    for (let n = 0; n < 2; n++) {
      for (let t = 0; t < T; t++) {
        for (let f = 0; f < D; f++) {
          const i = (n * T + t) * D + f; // [N, T, D]
          if (chosen.has(t)) {
            expect(after[i]).toBe(Math.fround(before[i]! * Math.fround(2.5)));
            if (after[i] !== before[i]) changed++;
          } else {
            expect(Object.is(after[i], before[i]) || (after[i] === 0 && before[i] === 0)).toBe(true);
          }
        }
      }
    }
    expect(changed).toBeGreaterThan(0);
  });
});

describe('recordModulated per head at a batch-first multi-head tensor vs PyTorch', () => {
  it('recordModulated(per: head gains on the merged heads [N, 16, 4·4], heads traced from the graph) matches a hook scaling each head of the attention values', async () => {
    const dir = tempFolder();
    const model = join(TOKENS, 'heads-net.onnx');
    const index = JSON.parse(readFileSync(join(TOKENS, 'index.json'), 'utf8')) as { headsNet: { onnx: string; gains: number[] } };
    const base = join(dir, 'base');
    await recordSnapshot({ model, stimuli: INPUTS, out: base, layers: 'all', batch: 2, threads: 1 });
    expect(maxRelativeError(await layerValues(openSnapshot(base), 'logits'), npy(join(TOKENS, 'heads_net_logits.npy')))).toBeLessThanOrEqual(1e-4);
    const path = join(dir, 'heads.json');
    writeFileSync(path, JSON.stringify({ site: index.headsNet.onnx, kind: 'gain', per: 'head', values: index.headsNet.gains }));
    const result = await recordModulated({ model, stimuli: INPUTS, out: join(dir, 'mod'), modulate: path, from: base, threads: 1 });
    expect(result.manifest.run.mode).toBe('tail');
    const logits = await layerValues(openSnapshot(result.folder), 'logits');
    expect(maxRelativeError(logits, npy(join(TOKENS, 'heads_net_logits_gain.npy')))).toBeLessThanOrEqual(1e-4);
  });
});
