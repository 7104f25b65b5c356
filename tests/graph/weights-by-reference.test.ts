import { execFileSync } from 'node:child_process';
import { copyFileSync, existsSync, mkdirSync, readFileSync, symlinkSync, utimesSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { exposureAdditions } from '../../src/graph/instrument.js';
import { loadModel, modelFileBytes, type LoadedModel } from '../../src/graph/load-model.js';
import { decodeModel, toNumber } from '../../src/graph/onnx.js';
import { runRowBytes } from '../../src/graph/run-memory.js';
import { encodeForRuntime } from '../../src/graph/weights-by-reference.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { buildTinyNet, externalise, tempFolder } from '../helpers/onnx-builder.js';
import { firstTensors, RESIDUAL, residualCopy, residualOutputs } from '../helpers/residual-runs.js';





/** The external-data entries of each initializer of `bytes`, by name. */
function externalEntries(bytes: Uint8Array): Map<string, { location: string; offset: number; length: number }> {
  const found = new Map<string, { location: string; offset: number; length: number }>();
  for (const tensor of decodeModel(bytes).graph!.initializer ?? []) {
    if (tensor.dataLocation !== 1) continue;
    const entries = new Map((tensor.externalData ?? []).map((e) => [e.key ?? '', e.value ?? '']));
    found.set(tensor.name ?? '', { location: entries.get('location')!, offset: Number(entries.get('offset')), length: Number(entries.get('length')) });
  }
  return found;
}

describe('encodeForRuntime', () => {
  it('stores each large weight as an external-data entry whose offset and length are its bytes in the model file (exact)', () => {
    const path = residualCopy();
    const model = loadModel(path);
    const file = readFileSync(path);
    const runtime = encodeForRuntime(model, exposureAdditions(model, firstTensors(model, 3)), { minBytes: 256 });
    expect(runtime.weights?.files.map((f) => f.path)).toEqual([path]);
    const entries = externalEntries(runtime.bytes);
    const large = (model.proto.graph!.initializer ?? []).filter((t) => (t.rawData?.byteLength ?? 0) >= 256);
    expect(large.length).toBeGreaterThan(3);
    expect([...entries.keys()].sort()).toEqual(large.map((t) => t.name).sort());
    for (const tensor of large) {
      const entry = entries.get(tensor.name!)!;
      expect(entry.location).toBe('residual.onnx');
      expect(Buffer.from(file.subarray(entry.offset, entry.offset + entry.length)).equals(Buffer.from(tensor.rawData!))).toBe(true);
    }
    expect(runtime.bytes.byteLength).toBeLessThan(file.byteLength / 4);
    // the model itself is left as it was
    expect(modelFileBytes(model)).toBeDefined();
    expect(decodeModel(runtime.bytes).graph!.output!.map((o) => o.name)).toEqual(['logits', ...firstTensors(model, 3)]);
  });

  it('Debian python3-onnx, loading the external data itself, reads the same weights as from the model file (onnx.external_data_helper)', (ctx) => {
    if (!existsSync('/usr/bin/python3')) return ctx.skip();
    const path = residualCopy();
    const model = loadModel(path);
    const runtime = encodeForRuntime(model, {}, { minBytes: 1 });
    const small = join(tempFolder(), 'referenced.onnx');
    writeFileSync(small, runtime.bytes);
    const script = `import json, sys, onnx
from onnx import numpy_helper, external_data_helper
ref = onnx.load(sys.argv[1])
m = onnx.load(sys.argv[2], load_external_data=False)
external = sum(1 for t in m.graph.initializer if t.data_location == onnx.TensorProto.EXTERNAL)
external_data_helper.load_external_data_for_model(m, sys.argv[3])
a = {t.name: numpy_helper.to_array(t) for t in ref.graph.initializer}
b = {t.name: numpy_helper.to_array(t) for t in m.graph.initializer}
print(json.dumps({"external": external, "same": sorted(a) == sorted(b) and all(a[k].dtype == b[k].dtype and a[k].shape == b[k].shape and (a[k] == b[k]).all() for k in a)}))`;
    let read: { external: number; same: boolean };
    try {
      read = JSON.parse(execFileSync('/usr/bin/python3', ['-c', script, path, small, runtime.weights!.folder], { encoding: 'utf8', timeout: 60_000, stdio: ['ignore', 'pipe', 'pipe'] })) as never;
    } catch (error) {
      if (/No module named 'onnx'/.test(String((error as { stderr?: string }).stderr ?? ''))) return ctx.skip();
      throw error;
    }
    expect(read.external).toBeGreaterThan(3);
    expect(read.same).toBe(true);
  });

  it('the runtime computes the same outputs from the weights by reference as from the model bytes (exact)', async () => {
    const path = residualCopy();
    const model = loadModel(path);
    const names = firstTensors(model, 6);
    const referenced = encodeForRuntime(model, exposureAdditions(model, names), { minBytes: 1 });
    expect(referenced.weights).toBeDefined();
    const embedded = encodeForRuntime({ ...model, proto: decodeModel(readFileSync(path)) }, exposureAdditions(model, names));
    expect(embedded.weights).toBeUndefined(); // a proto of its own, decoded from bytes Sonde did not register
    const a = await residualOutputs(referenced, model.input.name, ['logits', ...names]);
    const b = await residualOutputs(embedded, model.input.name, ['logits', ...names]);
    for (const name of ['logits', ...names]) expect(a[name]!.equals(b[name]!), name).toBe(true);
  });

  it('references weights in external data files in the model\'s folder too, by their own location', async () => {
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    const plain = buildTinyNet({ bias: true });
    writeFileSync(path, externalise(plain, folder, 'tiny.weights'));
    const model = loadModel(path);
    const runtime = encodeForRuntime(model, {}, { minBytes: 1 });
    const entries = [...externalEntries(runtime.bytes).values()];
    expect(entries.length).toBeGreaterThan(0);
    expect(new Set(entries.map((e) => e.location))).toEqual(new Set(['tiny.weights']));
    const inline = join(tempFolder(), 'inline.onnx');
    writeFileSync(inline, plain);
    const input = model.input.name;
    const dims = model.input.dims.map((d) => (typeof d === 'number' ? d : 1));
    const data = new Float32Array(dims.reduce((a, d) => a * d, 1)).map((_, i) => Math.sin(i));
    const results: Buffer[] = [];
    for (const source of [runtime, readFileSync(inline)]) {
      const session = await createNetworkSession(source, { threads: 1 });
      try {
        const out = await session.run({ [input]: { data, dims } });
        const first = Object.values(out)[0]!;
        results.push(Buffer.from(first.data.buffer, first.data.byteOffset, first.data.byteLength));
      } finally {
        await session.close();
      }
    }
    expect(results[0]!.equals(results[1]!)).toBe(true);
  });

  it('resolves a model named through a symbolic link to its real folder', async () => {
    const path = residualCopy();
    const links = tempFolder();
    const link = join(links, 'linked.onnx');
    symlinkSync(path, link);
    const model = loadModel(link);
    const runtime = encodeForRuntime(model, {}, { minBytes: 1 });
    expect(runtime.weights?.folder).toBe(join(path, '..'));
    expect([...externalEntries(runtime.bytes).values()][0]!.location).toBe('residual.onnx');
    const a = await residualOutputs(runtime, model.input.name, ['logits']);
    const b = await residualOutputs(readFileSync(path), model.input.name, ['logits']);
    expect(a['logits']!.equals(b['logits']!)).toBe(true);
  });

  it('keeps the weights in the bytes when the file changed since it was read, so the runtime runs the weights that were hashed', async () => {
    const path = residualCopy();
    const model = loadModel(path);
    const later = new Date(Date.now() + 60_000);
    utimesSync(path, later, later);
    const runtime = encodeForRuntime(model, {}, { minBytes: 1 });
    expect(runtime.weights).toBeUndefined();
    expect(runtime.bytes.byteLength).toBeGreaterThanOrEqual(readFileSync(path).byteLength);
  });

  it('createNetworkSession refuses a weights file that changed after the model was encoded (E_MODEL_CHANGED)', async () => {
    const path = residualCopy();
    const model = loadModel(path);
    const runtime = encodeForRuntime(model, {}, { minBytes: 1 });
    writeFileSync(path, readFileSync(path)); // same bytes, a new modification time: Sonde cannot tell them apart without reading
    const later = new Date(Date.now() + 60_000);
    utimesSync(path, later, later);
    await expect(createNetworkSession(runtime, { threads: 1 })).rejects.toMatchObject({ code: 'E_MODEL_CHANGED', message: expect.stringContaining(path) });
  });

  it('keeps weights built in memory (not views of a file) in the bytes', () => {
    const path = residualCopy();
    const model = loadModel(path);
    const graph = model.proto.graph!;
    const rebuilt: LoadedModel = { ...model, proto: Object.assign(Object.create(Object.getPrototypeOf(model.proto)), model.proto, { graph: { ...graph, initializer: graph.initializer!.map((t) => ({ ...t, rawData: t.rawData ? new Uint8Array(t.rawData) : t.rawData })) } }) };
    expect(encodeForRuntime(rebuilt, {}, { minBytes: 1 }).weights).toBeUndefined();
    // a mix: the copied weights stay, those still views of the file are referenced
    const half = graph.initializer!.map((t, i) => (i % 2 === 0 ? t : { ...t, rawData: t.rawData ? new Uint8Array(t.rawData) : t.rawData }));
    const mixed: LoadedModel = { ...model, proto: Object.assign(Object.create(Object.getPrototypeOf(model.proto)), model.proto, { graph: { ...graph, initializer: half } }) };
    const entries = externalEntries(encodeForRuntime(mixed, {}, { minBytes: 1 }).bytes);
    const expected = half.filter((t, i) => i % 2 === 0 && (t.rawData?.byteLength ?? 0) > 0).map((t) => t.name);
    expect([...entries.keys()].sort()).toEqual(expected.sort());
  });

  it('with release, drops the referenced weights from the model, whose structure stays readable, and the session still runs them (exact)', async () => {
    const path = residualCopy();
    const model = loadModel(path);
    const names = firstTensors(model, 4);
    const before = await residualOutputs(readFileSync(path), model.input.name, ['logits']);
    const rowBytes = runRowBytes(model, () => 10, { fed: [model.input.name], fetched: names });
    const runtime = encodeForRuntime(model, exposureAdditions(model, names), { minBytes: 1, release: true });
    expect(modelFileBytes(model)).toBeUndefined();
    const referenced = new Set(externalEntries(runtime.bytes).keys());
    for (const tensor of model.proto.graph!.initializer ?? []) if (referenced.has(tensor.name!)) expect(tensor.rawData!.byteLength, tensor.name!).toBe(0);
    expect(runRowBytes(model, () => 10, { fed: [model.input.name], fetched: names })).toBe(rowBytes);
    expect((model.proto.graph!.initializer ?? []).every((t) => (t.dims ?? []).every((d) => toNumber(d) >= 0))).toBe(true);
    const after = await residualOutputs(runtime, model.input.name, ['logits']);
    expect(after['logits']!.equals(before['logits']!)).toBe(true);
  });

  it('falls back to the model bytes for a model whose folder holds its weights no more (a weights file outside it is never named)', () => {
    const folder = tempFolder();
    mkdirSync(join(folder, 'inner'));
    const path = join(folder, 'inner', 'residual.onnx');
    copyFileSync(RESIDUAL, path);
    const model = loadModel(path);
    // the model now claims a path in another folder than the one its bytes came from
    const elsewhere = join(tempFolder(), 'elsewhere.onnx');
    writeFileSync(elsewhere, 'not read');
    const moved = { ...model, path: elsewhere };
    expect(encodeForRuntime(moved, {}, { minBytes: 1 }).weights).toBeUndefined();
  });
});
