import { readFileSync, statSync } from 'node:fs';
import { resolve } from 'node:path';
import quantile from '@stdlib/stats-base-dists-normal-quantile';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { readSidecar } from '../../src/graph/sidecar.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { DEMO_KINDS, createDisplaySet, type DemoDisplayOptions } from '../../src/stimuli/demo/index.js';
import { computeBaseline, strongestTuning, type BaselineTable } from '../../tools/demo-model/baseline.js';

const MODEL = resolve('models/demo/glyphnet.onnx');

interface ReferenceLogits {
  set: DemoDisplayOptions;
  indices: number[];
  logits: number[][];
}

describe('models/demo/glyphnet.onnx', () => {
  it('loadModel(glyphnet.onnx) has input "input" [batch, 3, 64, 64], opset 13, output "logits", and is under 2 MB', () => {
    const model = loadModel(MODEL);
    expect(model.input.name).toBe('input');
    expect(model.input.dims).toEqual(['batch', 3, 64, 64]);
    expect(model.opset).toBe(13);
    expect(model.outputs).toEqual(['logits']);
    expect(statSync(MODEL).size).toBeLessThan(2 * 1024 * 1024);
  });

  it('readSidecar(glyphnet.onnx) maps the 8 outputs to DEMO_KINDS in order and names tensors the graph has', () => {
    const sidecar = readSidecar(MODEL)!;
    expect(sidecar.outputs?.name).toBe('logits');
    expect(sidecar.outputs?.kinds).toEqual([...DEMO_KINDS]);
    // per-kind sigmoid logits: "present" above 0 (probability 0.5), the rule of the baseline table
    expect(sidecar.outputs?.threshold).toBe(0);
    const model = loadModel(MODEL);
    const produced = new Set((model.proto.graph!.node ?? []).flatMap((node) => node.output ?? []));
    const layers = sidecar.layers!;
    for (const layer of layers) expect(produced.has(layer.name), layer.name).toBe(true);
    // one ReLU output per conv stage (7), the 2 max-pools, the global pool and the logits
    expect(layers.map((layer) => layer.stage)).toEqual(['conv1', 'conv2', 'pool2', 'conv3', 'conv4', 'pool4', 'conv5', 'conv6', 'conv7', 'global-pool', 'logits']);
    expect(sidecar.preprocessing).toMatchObject({ size: [64, 64], mean: [0, 0, 0], std: [1, 1, 1] });
  });

  it('glyphnet.onnx run by onnxruntime matches the logits PyTorch computed at export (±1e-4)', async () => {
    // models/demo/reference-logits.json is written by tools/demo-model/train.py from the PyTorch model
    // (BatchNorm folded, eval mode) on displays that the TypeScript generator rebuilds here from their seed
    const reference = JSON.parse(readFileSync('models/demo/reference-logits.json', 'utf8')) as ReferenceLogits;
    const set = createDisplaySet(reference.set);
    const n = reference.indices.length;
    const batch = new Float32Array(n * 3 * 64 * 64);
    reference.indices.forEach((index, b) => batch.set(set.render(index).pixels, b * 3 * 64 * 64));
    const session = await createNetworkSession(readFileSync(MODEL), { threads: 1 });
    try {
      const out = await session.run({ input: { data: batch, dims: [n, 3, 64, 64] } });
      expect(out.logits!.dims).toEqual([n, 8]); // dynamic batch
      let worst = 0;
      for (let b = 0; b < n; b++) for (let k = 0; k < 8; k++) worst = Math.max(worst, Math.abs(out.logits!.data[b * 8 + k]! - reference.logits[b]![k]!));
      expect(worst).toBeLessThan(1e-4);
    } finally {
      await session.close();
    }
  });
});

describe('computeBaseline (held-out cued detection)', () => {
  let table: BaselineTable;
  let committed: BaselineTable;
  beforeAll(async () => {
    committed = JSON.parse(readFileSync('models/demo/baseline.json', 'utf8')) as BaselineTable;
    table = await computeBaseline({ modelPath: MODEL, seed: committed.sets.seed, perKind: committed.sets.perKind });
  });

  it('computeBaseline(glyphnet) mean accuracy is within ±2 points of models/demo/baseline.json and README.md', () => {
    expect(Math.abs(table.meanAccuracy - committed.meanAccuracy)).toBeLessThanOrEqual(0.02);
    const readme = readFileSync('models/demo/README.md', 'utf8');
    expect(readme).toContain(`**${committed.meanAccuracy.toFixed(3)}**`);
  });

  it('computeBaseline(glyphnet) is clearly imperfect: mean accuracy in the calibration band 0.65–0.80', () => {
    expect(table.meanAccuracy).toBeGreaterThanOrEqual(0.65);
    expect(table.meanAccuracy).toBeLessThanOrEqual(0.8);
  });

  it('computeBaseline(glyphnet) rows: exactly half the trials are signal trials and d′ = z(H) − z(F) per @stdlib', () => {
    for (const row of table.kinds) {
      expect(row.signalTrials).toBe(committed.sets.perKind / 2);
      expect(row.noiseTrials).toBe(committed.sets.perKind / 2);
      // reference quantile: @stdlib/stats-base-dists-normal-quantile; log-linear correction (Hautus 1995) only at 0 or 1
      const extreme = row.hits === 0 || row.hits === row.signalTrials || row.falseAlarms === 0 || row.falseAlarms === row.noiseTrials;
      const h = extreme ? (row.hits + 0.5) / (row.signalTrials + 1) : row.hits / row.signalTrials;
      const f = extreme ? (row.falseAlarms + 0.5) / (row.noiseTrials + 1) : row.falseAlarms / row.noiseTrials;
      expect(row.dPrime).toBeCloseTo(quantile(h, 0, 1) - quantile(f, 0, 1), 9);
      expect(row.accuracy).toBeCloseTo((row.hits + row.noiseTrials - row.falseAlarms) / (row.signalTrials + row.noiseTrials), 12);
    }
  });

  it('computeBaseline(glyphnet) shows real tuning: for most kinds a last-conv channel separates with/without by > 1 SD', () => {
    expect(table.tuningLayer).toBe(readSidecar(MODEL)!.layers!.find((layer) => layer.stage === 'conv7')!.name);
    const tuned = table.kinds.filter((row) => row.tuningEffect > 1).map((row) => row.kind);
    expect(tuned.length, `tuned kinds: ${tuned.join(', ')}`).toBeGreaterThanOrEqual(5);
  });
});

describe('strongestTuning', () => {
  it('strongestTuning(responses, channels, isSignal) picks the channel with the largest standardised difference', () => {
    // channel 0: signal 2, 2 / noise 0, 0 → difference 2, population SD 1 → effect 2 (exact)
    // channel 1: signal 1, 3 / noise 1, 3 → difference 0
    // channel 2: constant → zero variance → 0
    const responses = Float64Array.from([2, 1, 5, 2, 3, 5, 0, 1, 5, 0, 3, 5]);
    const isSignal = Uint8Array.from([1, 1, 0, 0]);
    expect(strongestTuning(responses, 3, isSignal)).toEqual({ channel: 0, effect: 2 });
  });

  it('strongestTuning(...) reports a negative effect when every channel prefers the noise trials', () => {
    const responses = Float64Array.from([0, 2]); // one channel, signal 0 / noise 2: difference −2, SD 1
    expect(strongestTuning(responses, 1, Uint8Array.from([1, 0]))).toEqual({ channel: 0, effect: -2 });
  });
});
