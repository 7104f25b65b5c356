import { describe, expect, it } from 'vitest';
import { injectModulations, modulationInputDims } from '../../src/graph/inject.js';
import { loadModel } from '../../src/graph/load-model.js';

const VIT = new URL('../reference/fixtures/attention/vit-opset14.onnx', import.meta.url).pathname;

describe('modulationInputDims', () => {
  it('modulationInputDims(site, rows) keeps the feature axis and sets the positions to 1 unless spatial (maps as before layouts)', () => {
    expect(modulationInputDims({ site: 'm', shape: [64, 7, 5], spatial: false }, 3)).toEqual([3, 64, 1, 1]);
    expect(modulationInputDims({ site: 'm', shape: [64, 7, 5], spatial: true }, 3)).toEqual([3, 64, 7, 5]);
    expect(modulationInputDims({ site: 'v', shape: [10], spatial: false }, 3)).toEqual([3, 10]);
    expect(modulationInputDims({ site: 't', shape: [197, 768], spatial: false, featureAxis: 1 }, 3)).toEqual([3, 1, 768]);
    expect(modulationInputDims({ site: 't', shape: [197, 768], spatial: true, featureAxis: 1 }, 3)).toEqual([3, 197, 768]);
    // a shared site (batch merged with tokens): one broadcast row, whatever the batch
    expect(modulationInputDims({ site: 'a', shape: [394, 768], spatial: false, featureAxis: 1, shared: true }, 3)).toEqual([1, 768]);
  });
});

describe('injectModulations', () => {
  it('injectModulations(shared site) declares G and B without a batch axis; a token site declares [batch, 1, D]', () => {
    const model = loadModel(VIT);
    const attention = '/encoder/layers/encoder_layer_1/self_attention/Reshape_3_output_0';
    const block = '/encoder/layers/encoder_layer_0/Add_1_output_0';
    const injected = injectModulations(model, [
      { site: attention, shape: [34, 16], spatial: false, featureAxis: 1, shared: true },
      { site: block, shape: [17, 16], spatial: false, featureAxis: 1 },
    ]);
    const dims = (name: string) => injected.proto.graph!.input!.find((i) => i.name === name)!.type!.tensorType!.shape!.dim!.map((d) => d.dimParam || Number(d.dimValue));
    expect(dims(`sonde.gain:${attention}`)).toEqual([1, 16]);
    expect(dims(`sonde.offset:${block}`)).toEqual(['batch', 1, 16]);
  });
});
