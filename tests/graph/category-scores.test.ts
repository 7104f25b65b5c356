/**
 * withCategoryScores (src/graph/category-scores.ts) and the ReduceLogSumExp gradient rule
 * (src/graph/gradient/rules-pool.ts). Checks:
 * - the appended nodes (Gather → ReduceLogSumExp → Concat; a one-unit category is its Gather alone),
 *   the original graph untouched, the model's identity (path, SHA-256) kept;
 * - the runtime's category scores equal groupScores (src/stats/log-sum-exp.ts, itself checked against
 *   torch.logsumexp) of the runtime's own logits, with logits scaled by 1000 so that a sum of exp()
 *   without the max shift would overflow float32 (exp(88.8) is float32's largest);
 * - the rule against Richardson finite differences of the forward graph (`sense --method richardson`,
 *   the builder's usual check; DEVELOPERS.md "…a gradient rule"), keepdims 0 and 1, axes as an attribute
 *   (opset 13) and as an input (opset 18).
 */
import { writeFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { withCategoryScores } from '../../src/graph/category-scores.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { decodeModel, encodeModel } from '../../src/graph/onnx.js';
import { senseSites } from '../../src/replay/sense.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { groupScores } from '../../src/stats/log-sum-exp.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { writeOpGraph, type OpGraph } from '../helpers/op-graph.js';

const GROUPS = [[0, 1, 2, 3, 4, 5, 6, 7, 8, 9], [500], [990, 3 * 111, 17]];

function tinyModel(scale = 1) {
  const proto = decodeModel(buildTinyNet({ bias: true, seed: 31, classes: 1000 }));
  const fc = proto.graph!.initializer!.find((t) => t.name === 'Wfc')!;
  const weights = new Float32Array(Uint8Array.from(fc.rawData!).buffer);
  for (let i = 0; i < weights.length; i++) weights[i]! *= scale;
  fc.rawData = new Uint8Array(weights.buffer);
  const path = join(tempFolder(), 'net.onnx');
  writeFileSync(path, encodeModel(proto));
  return loadModel(path);
}

describe('withCategoryScores', () => {
  it('withCategoryScores appends Gather → ReduceLogSumExp per category (a one-unit category: Gather alone) → Concat, keeps the original graph and the model identity', () => {
    const model = tinyModel();
    const before = model.proto.graph!.node!.map((n) => n.name);
    const { model: scored, output } = withCategoryScores(model, 'logits', GROUPS);
    expect(output).toBe('category_scores');
    expect(scored.outputs).toEqual(['logits', 'category_scores']);
    expect(scored.sha256).toBe(model.sha256);
    expect(scored.path).toBe(model.path);
    const nodes = scored.proto.graph!.node!;
    expect(nodes.slice(0, before.length).map((n) => n.name)).toEqual(before);
    expect(nodes.slice(before.length).map((n) => n.opType)).toEqual(['Gather', 'ReduceLogSumExp', 'Gather', 'Gather', 'ReduceLogSumExp', 'Concat']);
    expect(model.proto.graph!.node!.map((n) => n.name)).toEqual(before);
    expect(model.outputs).toEqual(['logits']);
    expect(() => withCategoryScores(model, 'nope', GROUPS)).toThrow(/"nope" is not a tensor/);
    expect(() => withCategoryScores(model, 'logits', [[1], []])).toThrow(/has no units/);
  });

  it('withCategoryScores: the runtime\'s scores equal groupScores of its own logits within 1e-6 relative, with logits large enough that exp() alone overflows float32', async () => {
    const model = tinyModel(1000);
    const { model: scored, output } = withCategoryScores(model, 'logits', GROUPS);
    const session = await createNetworkSession(exposeTensors(scored, ['logits']), { threads: 1 });
    const n = 5;
    const input = new Float32Array(n * 3 * 16 * 16).map((_, i) => ((i * 7919) % 997) / 997);
    let out;
    try {
      out = await session.run({ input: { data: input, dims: [n, 3, 16, 16] } }, ['logits', output]);
    } finally {
      await session.close();
    }
    const logits = out['logits']!.data;
    let spread = 0;
    for (let i = 0; i < n; i++) for (const u of GROUPS[0]!) spread = Math.max(spread, Math.abs(logits[i * 1000 + u]!));
    expect(spread).toBeGreaterThan(89);
    const want = groupScores(logits, n, 1000, GROUPS);
    const got = out[output]!.data;
    expect(got.length).toBe(n * GROUPS.length);
    for (let i = 0; i < want.length; i++) {
      expect(Number.isFinite(got[i]!)).toBe(true);
      expect(Math.abs(got[i]! - want[i]!)).toBeLessThanOrEqual(1e-6 * Math.max(1, Math.abs(want[i]!)));
    }
    // the one-unit category is the logit itself, bit for bit
    for (let i = 0; i < n; i++) expect(got[i * 3 + 1]).toBe(logits[i * 1000 + 500]);
  });

  it('withCategoryScores at opset 18 passes the axes as an input', () => {
    const proto = decodeModel(buildTinyNet({ seed: 2, classes: 20 }));
    proto.opsetImport![0]!.version = 18;
    const path = join(tempFolder(), 'net18.onnx');
    writeFileSync(path, encodeModel(proto));
    const { model } = withCategoryScores(loadModel(path), 'logits', [[0, 1, 2]]);
    const lse = model.proto.graph!.node!.find((n) => n.opType === 'ReduceLogSumExp')!;
    expect(lse.input!.length).toBe(2);
    expect(lse.attribute!.map((a) => a.name)).toEqual(['keepdims']);
  });
});

/** max over entries of |exact − richardson| / (largest |richardson| of the entry's category), gain kind. */
async function disagreement(spec: OpGraph): Promise<number> {
  const path = writeOpGraph(spec);
  const { npy } = writeStimuliNpy(dirname(path), [3, ...spec.input] as [number, number, number, number], 11);
  const exact = (await senseSites({ model: path, stimuli: npy, site: 's', threads: 1 })).sites[0]!;
  const fd = (await senseSites({ model: path, stimuli: npy, site: 's', threads: 1, method: 'richardson', step: 1e-2 })).sites[0]!;
  expect(exact.method).toBe('exact');
  let worst = 0;
  const K = exact.categories.length;
  for (let c = 0; c < K; c++) {
    let largest = 0;
    for (let k = 0; k < exact.channels; k++) largest = Math.max(largest, Math.abs(fd.sensitivity[k * K + c]!));
    expect(largest).toBeGreaterThan(0);
    for (let k = 0; k < exact.channels; k++) worst = Math.max(worst, Math.abs(exact.sensitivity[k * K + c]! - fd.sensitivity[k * K + c]!) / largest);
  }
  return worst;
}

describe('ReduceLogSumExp gradient rule', () => {
  for (const opset of [13, 18]) {
    for (const keepdims of [0, 1]) {
      it(`ReduceLogSumExp (opset ${opset}, keepdims ${keepdims}, over the spatial axes) agrees with Richardson finite differences within 1e-3`, async () => {
        const axes = opset >= 18 ? { inputs: ['s', 'ax'], attributes: { keepdims } } : { inputs: ['s'], attributes: { keepdims, axes: [2, 3] } };
        const spec: OpGraph = {
          input: [4, 3, 3],
          opset,
          nodes: [
            { op: 'Mul', inputs: ['x', 'w0'], outputs: ['s'] },
            { op: 'ReduceLogSumExp', inputs: axes.inputs, outputs: ['r'], attributes: axes.attributes },
            ...(keepdims ? [{ op: 'Flatten', inputs: ['r'], outputs: ['f'], attributes: { axis: 1 } }] : []),
            { op: 'Gemm', inputs: [keepdims ? 'f' : 'r', 'wg'], outputs: ['y'] },
          ],
          weights: { w0: { dims: [1, 4, 1, 1], scale: 2 }, wg: { dims: [4, 3] }, ...(opset >= 18 ? { ax: { dims: [2], int64: true, values: [2, 3] } } : {}) },
          output: 'y',
        };
        expect(await disagreement(spec)).toBeLessThan(1e-3);
      });
    }
  }
});
