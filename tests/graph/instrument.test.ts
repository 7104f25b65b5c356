import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { exposeTensors } from '../../src/graph/instrument.js';
import { injectModulations } from '../../src/graph/inject.js';
import { loadModel } from '../../src/graph/load-model.js';
import { decodeModel } from '../../src/graph/onnx.js';
import { selectLayers, globToRegExp } from '../../src/graph/select.js';

const RESIDUAL = new URL('../reference/fixtures/residual.onnx', import.meta.url).pathname;

function initializerBytes(bytes: Uint8Array): Map<string, string> {
  const model = decodeModel(bytes);
  return new Map((model.graph!.initializer ?? []).map((t) => [t.name!, Buffer.from(t.rawData ?? new Uint8Array()).toString('base64') + JSON.stringify(t.floatData ?? []) + JSON.stringify(t.dims)]));
}

describe('exposeTensors', () => {
  it('exposeTensors adds graph outputs and leaves every node and initializer byte-identical', () => {
    const model = loadModel(RESIDUAL);
    const original = readFileSync(RESIDUAL);
    const names = (model.proto.graph!.node ?? []).slice(0, 12).flatMap((n) => n.output ?? []);
    const exposed = exposeTensors(model, names);
    const before = initializerBytes(original);
    const after = initializerBytes(exposed);
    expect(after.size).toBe(before.size);
    for (const [name, value] of before) expect(after.get(name), name).toBe(value);
    const decoded = decodeModel(exposed);
    const originalDecoded = decodeModel(original);
    expect(JSON.stringify(decoded.graph!.node)).toBe(JSON.stringify(originalDecoded.graph!.node));
    const outputs = decoded.graph!.output!.map((o) => o.name);
    expect(outputs[0]).toBe('logits');
    for (const name of names) expect(outputs).toContain(name);
    // the model object itself is not changed
    expect(model.proto.graph!.output!.length).toBe(1);
  });

  it('injectModulations leaves the loaded model untouched and adds two inputs per site', () => {
    const model = loadModel(RESIDUAL);
    const site = '/features/features.6/conv/conv.0/conv.0.2/Clip_output_0';
    const injected = injectModulations(model, [{ site, shape: [96, 8, 8], spatial: false }]);
    expect(model.proto.graph!.input!.map((i) => i.name)).toEqual(['input']);
    expect(injected.proto.graph!.input!.map((i) => i.name)).toEqual(['input', `sonde.gain:${site}`, `sonde.offset:${site}`]);
    expect(injected.proto.graph!.node!.filter((n) => (n.output ?? []).includes(site)).map((n) => n.opType)).toEqual(['Add']);
    expect(() => injectModulations(model, [{ site, shape: [96, 8, 8], spatial: false }, { site, shape: [96, 8, 8], spatial: false }])).toThrow(/modulated twice/);
  });
});

describe('selectLayers', () => {
  const layers = [
    { name: 'conv1', op: 'Conv', default: false },
    { name: 'relu1', op: 'Relu', default: true },
    { name: 'block/relu2', op: 'Relu', default: true },
    { name: 'fc', op: 'Gemm', default: true },
  ];
  it('selectLayers combines default, op:, globs and names with +', () => {
    expect(selectLayers(layers, undefined).map((l) => l.name)).toEqual(['relu1', 'block/relu2', 'fc']);
    expect(selectLayers(layers, 'op:Conv').map((l) => l.name)).toEqual(['conv1']);
    expect(selectLayers(layers, 'op:Conv+block/*').map((l) => l.name)).toEqual(['conv1', 'block/relu2']);
    expect(selectLayers(layers, 'all').length).toBe(4);
    expect(selectLayers(layers, 'fc relu1').map((l) => l.name)).toEqual(['relu1', 'fc']);
  });
  it('selectLayers rejects unknown names, ops and empty globs with close matches', () => {
    expect(() => selectLayers(layers, 'relu3')).toThrow(/not found/);
    expect(() => selectLayers(layers, 'op:Sigmoid')).toThrow(/operator "Sigmoid"/);
    expect(() => selectLayers(layers, 'x*')).toThrow(/matches no recordable tensor/);
    expect(globToRegExp('a.b*').test('a.bcd')).toBe(true);
    expect(globToRegExp('a.b*').test('axbcd')).toBe(false);
  });
});
