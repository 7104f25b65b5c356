import { createHash } from 'node:crypto';
import { readFileSync, utimesSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { encodeWithAdditions } from '../../src/graph/append.js';
import { exposeTensors, exposureAdditions } from '../../src/graph/instrument.js';
import { loadModel, unreadWeightRange } from '../../src/graph/load-model.js';
import { decodeModel } from '../../src/graph/onnx.js';
import { readSkeleton } from '../../src/graph/read-skeleton.js';
import { encodeForRuntime } from '../../src/graph/weights-by-reference.js';
import type { RuntimeModel } from '../../src/session/network-session.js';
import { buildTinyNet, externalise, tempFolder } from '../helpers/onnx-builder.js';
import { firstTensors, RESIDUAL, residualCopy, residualOutputs } from '../helpers/residual-runs.js';

// The skeleton read leaves large raw weights in the file. Every check compares against the whole file:
// its SHA-256 from node:crypto, its decoding by protobufjs (the same decoder Sonde uses for whole reads,
// checked elsewhere against Debian's python3-onnx), and the runtime's outputs from the whole file's bytes.

const MIN = 64 * 1024;




const outputs11 = (model: Uint8Array | RuntimeModel, input: string, fetch: string[]) => residualOutputs(model, input, fetch, 11);

describe('readSkeleton', () => {
  it('decodes like the whole file with the large raw data left out, and says where each lies in the file (exact)', () => {
    const file = readFileSync(RESIDUAL);
    const read = readSkeleton(RESIDUAL, MIN)!;
    expect(read).not.toBeNull();
    expect(read.sha256).toBe(createHash('sha256').update(file).digest('hex'));
    expect(read.skeleton.byteLength).toBeLessThan(file.byteLength / 2);
    const whole = decodeModel(file);
    const skeleton = decodeModel(read.skeleton);
    expect(skeleton.graph!.node!.length).toBe(whole.graph!.node!.length);
    expect(JSON.stringify(skeleton.graph!.node)).toBe(JSON.stringify(whole.graph!.node));
    const left = new Map(read.weights.map((w) => [w.ordinal, w]));
    expect(left.size).toBeGreaterThan(2);
    const wholeInit = whole.graph!.initializer!;
    const skeletonInit = skeleton.graph!.initializer!;
    expect(skeletonInit.map((t) => t.name)).toEqual(wholeInit.map((t) => t.name));
    wholeInit.forEach((tensor, i) => {
      const raw = Buffer.from(tensor.rawData ?? new Uint8Array(0));
      const out = left.get(i);
      if (out) {
        expect(raw.byteLength, tensor.name!).toBeGreaterThanOrEqual(MIN);
        expect(skeletonInit[i]!.rawData?.byteLength ?? 0).toBe(0);
        expect(file.subarray(out.offset, out.offset + out.length).equals(raw), tensor.name!).toBe(true);
      } else {
        expect(raw.byteLength, tensor.name!).toBeLessThan(MIN);
        expect(Buffer.from(skeletonInit[i]!.rawData ?? new Uint8Array(0)).equals(raw)).toBe(true);
      }
      expect(skeletonInit[i]!.dims?.map(Number)).toEqual(tensor.dims?.map(Number));
    });
  });

  it('gives up (null) on an encoding it does not follow: a group field, a length past the end', () => {
    const folder = tempFolder();
    const file = readFileSync(RESIDUAL);
    const grouped = join(folder, 'grouped.onnx');
    // field 90 as a deprecated start-group (wire type 3) … end-group (4), appended at the top level
    writeFileSync(grouped, Buffer.concat([file, Buffer.from([0xd3, 0x05, 0xd4, 0x05])]));
    expect(readSkeleton(grouped, MIN)).toBeNull();
    const cut = join(folder, 'cut.onnx');
    writeFileSync(cut, file.subarray(0, file.byteLength - 1000));
    expect(readSkeleton(cut, MIN)).toBeNull();
  });
});

describe('loadModel leaving large weights in the file', () => {
  it('has the same hash, structure and weights as a whole read; each weight is read the first time it is asked for', () => {
    const path = residualCopy();
    const whole = loadModel(path);
    const lazy = loadModel(path, { skeletonFromBytes: 0 });
    expect(lazy.sha256).toBe(whole.sha256);
    expect(lazy.input).toEqual(whole.input);
    expect(lazy.outputs).toEqual(whole.outputs);
    const a = whole.proto.graph!.initializer!;
    const b = lazy.proto.graph!.initializer!;
    const unread = b.filter((t) => unreadWeightRange(t) !== undefined);
    expect(unread.length).toBeGreaterThan(2);
    expect(a.every((t) => unreadWeightRange(t) === undefined)).toBe(true);
    a.forEach((tensor, i) => {
      expect(Buffer.from(b[i]!.rawData ?? new Uint8Array(0)).equals(Buffer.from(tensor.rawData ?? new Uint8Array(0))), tensor.name!).toBe(true);
      expect(unreadWeightRange(b[i]!)).toBeUndefined(); // read now
    });
    // a weight replaced before it is read is never read
    const other = loadModel(path, { skeletonFromBytes: 0 });
    const target = other.proto.graph!.initializer!.find((t) => unreadWeightRange(t) !== undefined)!;
    target.rawData = new Uint8Array([1, 2, 3, 4]);
    expect(unreadWeightRange(target)).toBeUndefined();
    expect([...target.rawData]).toEqual([1, 2, 3, 4]);
  });

  it('refuses to read a weight from a file that changed since it was hashed (E_MODEL_CHANGED)', () => {
    const path = residualCopy();
    const lazy = loadModel(path, { skeletonFromBytes: 0 });
    const later = new Date(Date.now() + 60_000);
    utimesSync(path, later, later);
    const target = lazy.proto.graph!.initializer!.find((t) => unreadWeightRange(t) !== undefined)!;
    expect(() => target.rawData).toThrow(expect.objectContaining({ code: 'E_MODEL_CHANGED', message: expect.stringContaining(path) }));
  });

  it('reads a model with external weight files whole (its hash covers them), with the same hash as the default load', () => {
    const folder = tempFolder();
    const path = join(folder, 'tiny.onnx');
    writeFileSync(path, externalise(buildTinyNet({ bias: true }), folder, 'tiny.weights'));
    const lazy = loadModel(path, { skeletonFromBytes: 0 });
    expect(lazy.sha256).toBe(loadModel(path).sha256);
    expect(lazy.proto.graph!.initializer!.every((t) => unreadWeightRange(t) === undefined && (t.rawData?.byteLength ?? 0) > 0)).toBe(true);
  });

  it('reports a truncated model as not ONNX, as a whole read does (E_MODEL_FORMAT)', () => {
    const path = join(tempFolder(), 'cut.onnx');
    writeFileSync(path, readFileSync(RESIDUAL).subarray(0, 200_000));
    expect(() => loadModel(path, { skeletonFromBytes: 0 })).toThrow(expect.objectContaining({ code: 'E_MODEL_FORMAT' }));
  });

  it('the runtime computes the same outputs from weights never read by Sonde (by reference) and from the whole file (exact), and referencing reads none', async () => {
    const path = residualCopy();
    const lazy = loadModel(path, { skeletonFromBytes: 0 });
    const names = firstTensors(lazy, 6);
    const runtime = encodeForRuntime(lazy, exposureAdditions(lazy, names));
    expect(runtime.weights?.files.map((f) => f.path)).toEqual([path]);
    const stillUnread = lazy.proto.graph!.initializer!.filter((t) => unreadWeightRange(t) !== undefined).length;
    expect(stillUnread).toBeGreaterThan(2);
    const whole = loadModel(path);
    const fetch = ['logits', ...names];
    const a = await outputs11(runtime, lazy.input.name, fetch);
    const b = await outputs11(encodeWithAdditions(whole, exposureAdditions(whole, names)), whole.input.name, fetch);
    // the path that hands bytes over reads the unread weights as it encodes them
    const c = await outputs11(exposeTensors(lazy, names), lazy.input.name, fetch);
    for (const name of fetch) {
      expect(a[name]!.equals(b[name]!), name).toBe(true);
      expect(c[name]!.equals(b[name]!), name).toBe(true);
    }
  });
});
