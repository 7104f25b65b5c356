import { execFileSync } from 'node:child_process';
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { encodeWithAdditions } from '../../src/graph/append.js';
import { exposeTensorsAsFloat16 } from '../../src/graph/expose-half.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { layoutGeometry } from '../../src/graph/layout.js';
import { loadModel, modelFileBytes, type LoadedModel } from '../../src/graph/load-model.js';
import { runRowBytes } from '../../src/graph/run-memory.js';
import { decodeModel, makeValueInfo, onnx } from '../../src/graph/onnx.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { createRandom } from '../../src/random.js';
import { buildTinyNet, externalise, tempFolder } from '../helpers/onnx-builder.js';

const RESIDUAL = new URL('../reference/fixtures/residual.onnx', import.meta.url).pathname;

/** The same model with a proto of its own (as derived models have): graph/append.ts must encode it in full. */
function derived(model: LoadedModel): LoadedModel {
  return { ...model, proto: decodeModel(readFileSync(model.path)) };
}

/** Names of the first `count` node outputs of `model`. */
function firstTensors(model: LoadedModel, count: number): string[] {
  return (model.proto.graph!.node ?? []).slice(0, count).flatMap((n) => n.output ?? []);
}

/** Debian's onnx package (python3-onnx) reading `bytes` with its C++ protobuf parser; null where it is not installed. */
function onnxPythonReads(bytes: Uint8Array): { outputs: string[]; nodes: number; initializers: number; lastOps: string[] } | null {
  if (!existsSync('/usr/bin/python3')) return null;
  const path = join(tempFolder(), 'appended.onnx');
  writeFileSync(path, bytes);
  const script = `import json, sys, onnx
m = onnx.load(sys.argv[1])
g = m.graph
print(json.dumps({"outputs": [o.name for o in g.output], "nodes": len(g.node), "initializers": len(g.initializer), "lastOps": [n.op_type for n in g.node[-3:]]}))`;
  try {
    return JSON.parse(execFileSync('/usr/bin/python3', ['-c', script, path], { encoding: 'utf8', timeout: 60_000, stdio: ['ignore', 'pipe', 'pipe'] })) as never;
  } catch (error) {
    if (/No module named 'onnx'/.test(String((error as { stderr?: string }).stderr ?? ''))) return null;
    throw error;
  }
}

describe('encodeWithAdditions', () => {
  it('appends to the file bytes of a model loaded from its file, and to nothing else', () => {
    const model = loadModel(RESIDUAL);
    const file = readFileSync(RESIDUAL);
    expect(modelFileBytes(model)).toBeDefined();
    const bytes = exposeTensors(model, firstTensors(model, 4));
    expect(Buffer.from(bytes.subarray(0, file.length)).equals(file)).toBe(true);
    expect(bytes.length).toBeGreaterThan(file.length);
    // a whole buffer of its own, so a session can take it over
    expect(bytes.byteOffset).toBe(0);
    expect(bytes.byteLength).toBe(bytes.buffer.byteLength);
    // derived models and models whose weights were inlined from external files are encoded in full
    expect(modelFileBytes(derived(model))).toBeUndefined();
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    writeFileSync(path, externalise(buildTinyNet({ bias: true }), folder));
    expect(modelFileBytes(loadModel(path))).toBeUndefined();
  });

  it('the appended model decodes to the same graph as the full encoding (protobuf merges a repeated message field; protobuf.dev "Encoding", Last One Wins)', () => {
    const model = loadModel(RESIDUAL);
    const names = firstTensors(model, 12);
    const geometries = names.map(() => layoutGeometry([8, 8, 8]));
    for (const make of [(m: LoadedModel) => exposeTensors(m, names), (m: LoadedModel) => exposeTensorsAsFloat16(m, names, geometries)]) {
      const appended = decodeModel(make(model));
      const full = decodeModel(make(derived(model)));
      expect(JSON.stringify(appended.graph!.output)).toBe(JSON.stringify(full.graph!.output));
      expect(JSON.stringify(appended.graph!.node)).toBe(JSON.stringify(full.graph!.node));
      expect(appended.graph!.initializer!.map((t) => t.name)).toEqual(full.graph!.initializer!.map((t) => t.name));
      expect(appended.graph!.name).toBe(full.graph!.name);
    }
    // the loaded model is left as it was
    expect(model.proto.graph!.output!.map((o) => o.name)).toEqual(['logits']);
  });

  it('Debian python3-onnx (its C++ protobuf parser) reads the appended model with the additions after the model\'s own entries', (ctx) => {
    const model = loadModel(RESIDUAL);
    const own = { nodes: model.proto.graph!.node!.length, initializers: model.proto.graph!.initializer!.length };
    const names = firstTensors(model, 3);
    const read = onnxPythonReads(exposeTensorsAsFloat16(model, names, names.map(() => layoutGeometry([8, 8, 8]))));
    if (read === null) return ctx.skip();
    expect(read.outputs[0]).toBe('logits');
    expect(read.outputs.slice(1, 3)).toEqual([`${names[0]}::float16`, `${names[0]}::means`]);
    expect(read.nodes).toBe(own.nodes + 3 * names.length);
    expect(read.initializers).toBeGreaterThan(own.initializers);
    expect(read.lastOps).toEqual(['Cast', 'Reshape', 'ReduceMean']);
  });

  it('the runtime computes the same outputs from the appended and the fully encoded model (exact)', async () => {
    const model = loadModel(RESIDUAL);
    const names = firstTensors(model, 6);
    const rng = createRandom(11);
    const data = new Float32Array(2 * 3 * 64 * 64).map(() => rng.normal());
    const results = [];
    for (const bytes of [exposeTensors(model, names), exposeTensors(derived(model), names)]) {
      const session = await createNetworkSession(bytes, { threads: 1 });
      try {
        results.push(await session.run({ [model.input.name]: { data, dims: [2, 3, 64, 64] } }, ['logits', ...names]));
      } finally {
        await session.close();
      }
    }
    for (const name of ['logits', ...names]) expect(Buffer.from(results[0]![name]!.data.buffer).equals(Buffer.from(results[1]![name]!.data.buffer)), name).toBe(true);
  });

  it('adds outputs without types, which the runtime infers', () => {
    const model = loadModel(RESIDUAL);
    const name = firstTensors(model, 1)[0]!;
    const graph = decodeModel(encodeWithAdditions(model, { output: [makeValueInfo(name)] })).graph!;
    expect(graph.output!.map((o) => o.name)).toEqual(['logits', name]);
  });
});

describe('encodeWithAdditions, consume', () => {
  it('writes the additions after the file\'s bytes in their own buffer, which a session then takes whole; the graph structure stays readable and the outputs are the full encoding\'s (exact)', async () => {
    const model = loadModel(RESIDUAL);
    const file = modelFileBytes(model)!;
    const names = firstTensors(model, 6);
    const rowBytesBefore = runRowBytes(model, () => 10, { fed: [model.input.name], fetched: names });
    const bytes = exposeTensors(model, names, { consume: true });
    expect(bytes.buffer).toBe(file.buffer);
    expect(bytes.byteOffset).toBe(file.byteOffset);
    expect(modelFileBytes(model)).toBeUndefined(); // taken: nothing appends there again
    const reference = exposeTensors(derived(model), names);
    expect(JSON.stringify(decodeModel(bytes).graph!.output)).toBe(JSON.stringify(decodeModel(reference).graph!.output));
    const rng = createRandom(5);
    const data = new Float32Array(2 * 3 * 64 * 64).map(() => rng.normal());
    const results = [];
    for (const [b, give] of [[bytes, true], [reference, false]] as const) {
      const session = await createNetworkSession(b, { threads: 1, giveBytes: give });
      try {
        results.push(await session.run({ [model.input.name]: { data, dims: [2, 3, 64, 64] } }, ['logits', ...names]));
      } finally {
        await session.close();
      }
    }
    for (const name of ['logits', ...names]) expect(Buffer.from(results[0]![name]!.data.buffer).equals(Buffer.from(results[1]![name]!.data.buffer)), name).toBe(true);
    // given away: the weights' views are detached, the structure (what a recording reads afterwards) is not
    expect(file.byteLength).toBe(0);
    expect(runRowBytes(model, () => 10, { fed: [model.input.name], fetched: names })).toBe(rowBytesBefore);
  });

  it('copies where the additions do not fit in the room after the file (2 MiB and 1/64 of its size)', () => {
    const model = loadModel(RESIDUAL);
    const file = modelFileBytes(model)!;
    const name = firstTensors(model, 1)[0]!;
    // 40 000 declarations of a long name: about 2.7 MB, more than the residual model's room
    const many = Array.from({ length: 40_000 }, () => makeValueInfo(`${name}/${'x'.repeat(40)}`));
    const bytes = encodeWithAdditions(model, { output: many }, { consume: true });
    expect(bytes.buffer).not.toBe(file.buffer);
    expect(bytes.byteLength).toBe(bytes.buffer.byteLength);
    expect(modelFileBytes(model)).toBe(file); // not taken
  });

  it('hands back a buffer of its own when the model is encoded in full, even a small one protobufjs takes from the shared Buffer pool', () => {
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    writeFileSync(path, externalise(buildTinyNet({ bias: true }), folder));
    const model = loadModel(path); // external weights: encoded in full
    const bytes = exposeTensors(model, ['relu0']);
    expect(bytes.byteOffset).toBe(0);
    expect(bytes.byteLength).toBe(bytes.buffer.byteLength);
  });
});

describe('decodeModel', () => {
  it('merges every occurrence of the graph field in order, later names replacing earlier ones (20 000 occurrences, as a hostile file may hold)', () => {
    const file = readFileSync(RESIDUAL);
    const parts: Uint8Array[] = [file];
    for (let i = 0; i < 20_000; i++) parts.push(onnx.ModelProto.encode({ graph: { output: [{ name: `extra${i}` }], ...(i === 19_999 ? { name: 'renamed' } : {}) } }).finish());
    const bytes = Buffer.concat(parts);
    const graph = decodeModel(bytes).graph!;
    const own = decodeModel(file).graph!;
    expect(graph.output!.length).toBe(own.output!.length + 20_000);
    expect(graph.output![own.output!.length]!.name).toBe('extra0');
    expect(graph.output!.at(-1)!.name).toBe('extra19999');
    expect(graph.node!.length).toBe(own.node!.length);
    expect(graph.name).toBe('renamed');
  });

  it('does not count a graph field inside a (deprecated) group of an unknown field as the model\'s own (protobuf wire types 3 and 4)', () => {
    const file = readFileSync(RESIDUAL);
    const inner = onnx.ModelProto.encode({ graph: { output: [{ name: 'inside_a_group' }] } }).finish();
    const outer = onnx.ModelProto.encode({ graph: { output: [{ name: 'after_the_group' }] } }).finish();
    // field 99 as a group: start tag (99 << 3 | 3) and end tag (99 << 3 | 4), each a two-byte varint
    const start = Buffer.from([(99 << 3 | 3) & 0x7f | 0x80, (99 << 3 | 3) >> 7]);
    const end = Buffer.from([(99 << 3 | 4) & 0x7f | 0x80, (99 << 3 | 4) >> 7]);
    const names = decodeModel(Buffer.concat([file, start, inner, end, outer])).graph!.output!.map((o) => o.name);
    expect(names).toContain('logits');
    expect(names).toContain('after_the_group');
    expect(names).not.toContain('inside_a_group');
  });
});
