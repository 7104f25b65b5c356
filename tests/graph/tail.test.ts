/**
 * Tail graphs fed from an upstream cut: `upstreamCut` finds the recorded tensors closest to a site,
 * `extractTail` computes the site and everything below it from them. Checked on two seeded torchvision
 * networks exported by tests/reference/make_fixtures.py and make_gradient_fixtures.py (Debian
 * python3-torch): mobilenet_v2 (residual blocks) and a VisionTransformer (token tensors, attention,
 * layer norm, run-time shape arithmetic). Exact property: the tail computes the same function as the
 * whole network, so its values equal the whole (modulated) network's (bit for bit where the runtime
 * optimises both alike).
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { injectModulations, modulationInputDims, modulationInputNames, type InjectionSite } from '../../src/graph/inject.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { analyseGraph } from '../../src/graph/structure.js';
import { extractTail, upstreamCut } from '../../src/graph/tail.js';
import { createRandom } from '../../src/random.js';
import { inspectModel } from '../../src/record/inspect-model.js';
import { createNetworkSession, type FloatTensor } from '../../src/session/network-session.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { maxRelativeError } from '../helpers/max-relative-error.js';

const FIXTURES = new URL('../reference/fixtures/', import.meta.url).pathname;

function npy(path: string): FloatTensor {
  const parsed = parseNpy(readFileSync(path), path);
  return { data: parsed.data as Float32Array, dims: parsed.shape };
}


describe('upstreamCut', () => {
  const model = loadModel(join(FIXTURES, 'residual.onnx'));
  const structure = analyseGraph(model);
  const site = '/features/features.6/conv/conv.0/conv.0.2/Clip_output_0';
  const block5 = '/features/features.5/Add_output_0';
  const block3 = '/features/features.3/Add_output_0';

  it('upstreamCut stops at the recorded block output closest to the site and recomputes only the tensors between', () => {
    const cut = upstreamCut(structure, [site], (t) => t === block5 || t === block3);
    expect('recompute' in cut).toBe(true);
    if (!('recompute' in cut)) return;
    // features.6.conv.0 = Conv (BatchNorm folded) then Clip (ReLU6): two tensors between features.5 and the site
    expect([...cut.recompute].sort()).toEqual([site, '/features/features.6/conv/conv.0/conv.0.0/Conv_output_0'].sort());
    const tail = extractTail(model, structure, [site], ['logits'], cut.recompute)!;
    expect(tail.boundary).toEqual([block5]);
    expect(tail.computed.has('/features/features.6/Add_output_0')).toBe(true);
    expect(tail.computed.has(block5)).toBe(false);
  });

  it('upstreamCut walks further up when the closest block is not recorded, and names the input when nothing separates the site from it', () => {
    const cut = upstreamCut(structure, [site], (t) => t === block3);
    expect('recompute' in cut && cut.recompute.has(block5)).toBe(true);
    if ('recompute' in cut) expect(extractTail(model, structure, [site], ['logits'], cut.recompute)!.boundary).toEqual([block3]);
    expect(upstreamCut(structure, [site], () => false)).toEqual({ missing: 'input' });
    // a recorded site needs nothing recomputed, however little else was recorded upstream
    const fed = upstreamCut(structure, [site], (t) => t === site || t === block5);
    expect('recompute' in fed && fed.recompute.size).toBe(0);
  });
});

describe('extractTail fed from an upstream cut', () => {
  it('extractTail on a VisionTransformer: a token-selective gain inside block 2, fed from a recorded block output, equals the whole modulated network bit for bit', async () => {
    // seeded torchvision VisionTransformer: 32 px, patches of 8 (16 tokens + class token), 2 layers, width 16
    const model = loadModel(join(FIXTURES, 'attention', 'vit-opset17.onnx'));
    const inspection = await inspectModel(model);
    const x = npy(join(FIXTURES, 'attention', 'inputs.npy'));
    const rows = x.dims[0]!;
    const site = '/encoder/layers/encoder_layer_1/mlp/mlp.1/Mul_1_output_0'; // GELU output of block 2's MLP
    const block1 = '/encoder/layers/encoder_layer_0/Add_1_output_0';
    const attended = '/encoder/layers/encoder_layer_1/Add_output_0'; // block 2's attention residual, upstream of the site
    const below = '/encoder/layers/encoder_layer_1/Add_1_output_0';
    const shape = inspection.layers.find((l) => l.name === site)!.shape;
    expect(shape.length).toBe(2); // [tokens, features]
    const injection: InjectionSite = { site, shape, spatial: false };
    const names = modulationInputNames(site);
    const dims = modulationInputDims(injection, rows); // [rows, tokens, 1]: one gain per token
    const random = createRandom(20240607);
    const gain = Float32Array.from({ length: dims.reduce((a, b) => a * b, 1) }, () => 0.25 + 1.5 * random.uniform());
    const offset = Float32Array.from(gain, () => 0.2 * (random.uniform() - 0.5));
    const modulation = { [names.gain]: { data: gain, dims }, [names.offset]: { data: offset, dims } };

    // the baseline: the unmodulated network with the block output recorded
    const plain = await createNetworkSession(exposeTensors(model, [block1, attended]), { threads: 1 });
    const recorded = await plain.run({ [model.input.name]: x });
    await plain.close();
    // the reference: the whole network with the gain injected
    const whole = await createNetworkSession(exposeTensors(injectModulations(model, [injection]), [below, 'logits']), { threads: 1 });
    const want = await whole.run({ [model.input.name]: x, ...modulation });
    await whole.close();

    for (const fedFrom of [[block1], [block1, attended]]) {
      const cut = upstreamCut(inspection.structure, [site], (t) => fedFrom.includes(t));
      if (!('recompute' in cut)) throw new Error(`no cut: ${cut.missing}`);
      const tail = extractTail(model, inspection.structure, [site], [below, 'logits'], cut.recompute)!;
      // the closest recorded tensor is the only one fed; the attention part is recomputed only when it was not recorded
      expect(tail.boundary).toEqual([fedFrom[fedFrom.length - 1]]);
      expect(cut.recompute.has(attended)).toBe(fedFrom.length === 1);
      const session = await createNetworkSession(exposeTensors(injectModulations(tail.model, [injection]), [below, 'logits']), { threads: 1 });
      const feeds: Record<string, FloatTensor> = { ...modulation };
      for (const name of tail.boundary) feeds[name] = recorded[name]!;
      const got = await session.run(feeds, [below, 'logits']);
      await session.close();
      for (const name of [below, 'logits']) {
        expect(got[name]!.dims).toEqual(want[name]!.dims);
        // no convolution below the site, so the runtime's layout optimisation (which makes the residual
        // network's tail differ within float32 rounding, tests/record/record-modulated.test.ts) has nothing to convert
        expect(maxRelativeError(got[name]!.data, want[name]!.data), `${name} fed from ${fedFrom.join(', ')}`).toBe(0);
      }
    }
  });
});
