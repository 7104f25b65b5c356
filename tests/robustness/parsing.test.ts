/**
 * Strict parsing of what users hand Sonde: `.npy` headers by the NumPy format specification
 * (numpy.lib.format, "A Simple File Format for NumPy Arrays", NEP 1), JSON without duplicate keys, tensor
 * and file names that are not valid UTF-8, and the runtime's own log lines kept off the terminal.
 * The `.npy` fixtures are written byte by byte here.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { beforeAll, describe, expect, it } from 'vitest';
import { parseJson } from '../../src/json.js';
import { parseNpy, parseNpyHeader } from '../../src/stimuli/npy.js';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { ensureBuilt, startSonde, finished } from './cli-process.js';

const { onnx } = onnxProto;
let dir: string;

beforeAll(() => {
  dir = tempFolder();
});

/**
 * A `.npy` file by hand: magic, version, little-endian HEADER_LEN (2 bytes for 1.0, 4 for 2.0/3.0),
 * the header text padded with spaces and a newline so that the header ends on a multiple of `align`
 * (64 as NumPy writes; `align: 0` leaves it unpadded), then `data`.
 */
function npyBytes(header: string, data: Uint8Array, options: { major?: number; minor?: number; align?: number; newline?: boolean } = {}): Uint8Array {
  const major = options.major ?? 1;
  const start = major === 1 ? 10 : 12;
  const align = options.align ?? 64;
  const newline = options.newline ?? true;
  const body = Buffer.from(header, major === 3 ? 'utf8' : 'latin1');
  const unpadded = start + body.length + (newline ? 1 : 0);
  const pad = align > 0 ? (align - (unpadded % align)) % align : 0;
  const text = Buffer.concat([body, Buffer.from(' '.repeat(pad) + (newline ? '\n' : ''), 'latin1')]);
  const out = new Uint8Array(start + text.length + data.length);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, major, options.minor ?? 0], 0);
  const view = new DataView(out.buffer);
  if (major === 1) view.setUint16(8, text.length, true);
  else view.setUint32(8, text.length, true);
  out.set(text, start);
  out.set(data, start + text.length);
  return out;
}

const f32 = (values: number[]) => new Uint8Array(Float32Array.from(values).buffer);
const SIX = f32([0, 1, 2, 3, 4, 5]);
const GOOD = "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }";

describe('parseNpy: the NumPy format specification (numpy.lib.format, NEP 1)', () => {
  it('parseNpy reads versions 1.0, 2.0 and 3.0 (4-byte HEADER_LEN from 2.0, UTF-8 header in 3.0), keys in any order', () => {
    for (const major of [1, 2, 3]) {
      const t = parseNpy(npyBytes(GOOD, SIX, { major }), `v${major}`);
      expect(t.shape).toEqual([2, 3]);
      expect([...t.data]).toEqual([0, 1, 2, 3, 4, 5]);
    }
    // "A reader MUST NOT depend on" the keys being sorted (numpy.lib.format)
    expect(parseNpy(npyBytes("{'shape': (2, 3), 'fortran_order': False, 'descr': '<f4'}", SIX)).shape).toEqual([2, 3]);
    // a header padded to 16 bytes, as NumPy wrote before 1.14 (from memory), still reads
    expect(parseNpyHeader(npyBytes(GOOD, SIX, { align: 16 })).shape).toEqual([2, 3]);
    // one axis is the tuple (n,); () is a 0-d array of one element; Python 2 wrote 6L
    expect(parseNpy(npyBytes("{'descr': '<f4', 'fortran_order': False, 'shape': (6,), }", SIX)).shape).toEqual([6]);
    expect(parseNpy(npyBytes("{'descr': '<f4', 'fortran_order': False, 'shape': (), }", f32([7]))).data[0]).toBe(7);
    expect(parseNpy(npyBytes("{'descr': '<f4', 'fortran_order': False, 'shape': (2L, 3L), }", SIX)).shape).toEqual([2, 3]);
  });

  it('parseNpy reorders fortran_order True data (first axis fastest) into C order', () => {
    // the 2×3 array [[0, 1, 2], [3, 4, 5]] in column-major order is 0, 3, 1, 4, 2, 5 (numpy.save of
    // np.asfortranarray writes exactly these bytes; checked by hand with NumPy 1.24, not run in CI)
    const t = parseNpy(npyBytes("{'descr': '<f4', 'fortran_order': True, 'shape': (2, 3), }", f32([0, 3, 1, 4, 2, 5])));
    expect([...t.data]).toEqual([0, 1, 2, 3, 4, 5]);
    // 2×2×2: element (i, j, k) sits at i + 2j + 4k in Fortran order and holds 100i + 10j + k here
    const fortran: number[] = [];
    for (let k = 0; k < 2; k++) for (let j = 0; j < 2; j++) for (let i = 0; i < 2; i++) fortran.push(100 * i + 10 * j + k);
    const cube = parseNpy(npyBytes("{'descr': '<f4', 'fortran_order': True, 'shape': (2, 2, 2), }", f32(fortran)));
    expect([...cube.data]).toEqual([0, 1, 10, 11, 100, 101, 110, 111]);
  });

  it('parseNpy refuses what the specification rules out, naming the rule', () => {
    const cases: Array<[Uint8Array, RegExp]> = [
      [npyBytes(GOOD, SIX, { minor: 1 }), /unsupported \.npy format version 1\.1/],
      [npyBytes(GOOD, SIX, { major: 4 }), /unsupported \.npy format version 4\.0/],
      [npyBytes(GOOD, SIX, { align: 0 }), /not on a multiple of 16/],
      [npyBytes(`${GOOD}    `, SIX, { newline: false }), /does not end with a newline/],
      [npyBytes("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), 'extra': 1}", SIX), /unexpected key "extra"/],
      [npyBytes("{'descr': '<f4', 'fortran_order': False}", SIX), /missing key shape/],
      [npyBytes("{'descr': '<f4', 'descr': '<f4', 'fortran_order': False, 'shape': (2, 3)}", SIX), /key "descr" appears twice/],
      [npyBytes("{'descr': '<f4', 'fortran_order': False, 'shape': (6)}", SIX), /one axis is written \(n,\)/],
      [npyBytes("{'descr': '<f4', 'fortran_order': 0, 'shape': (2, 3)}", SIX), /"fortran_order" must be True or False/],
      [npyBytes("{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (2,)}", SIX), /structured arrays are not supported/],
      [npyBytes("{'descr': '<f4', 'fortran_order': False, 'shape': (2, -3)}", SIX), /non-negative integer/],
      [npyBytes(`${GOOD} x`, SIX), /only spaces may follow the dict/],
      [npyBytes(GOOD, new Uint8Array([...SIX, 0, 0, 0, 0])), /4 bytes follow the data/],
      [npyBytes(GOOD, SIX.subarray(0, 20)), /data is truncated/],
      [npyBytes(GOOD.replace('<f4', '>f4'), SIX), /dtype ">f4" is not supported/],
    ];
    for (const [bytes, message] of cases) expect(() => parseNpy(bytes, 'x.npy'), String(message)).toThrow(message);
    // a v3.0 header that is not UTF-8 (0xff cannot start a UTF-8 sequence)
    const bad = npyBytes(GOOD, SIX, { major: 3 });
    bad[12 + 2] = 0xff;
    expect(() => parseNpy(bad, 'x.npy')).toThrow(/not valid UTF-8/);
  });
});

describe('parseJson: duplicate keys', () => {
  it('parseJson(text) refuses an object naming a key twice (JSON.parse would silently keep the last), keys compared unescaped', () => {
    // ECMA-262 JSON.parse: the later of two equal names wins; RFC 8259 §4 leaves duplicates unpredictable
    expect((JSON.parse('{"strength": 0.1, "strength": 10}') as { strength: number }).strength).toBe(10);
    expect(() => parseJson('{"strength": 0.1, "strength": 10}')).toThrow(/duplicate key "strength" at line 1, column 19/);
    expect(() => parseJson('{\n  "a": {"b": 1,\n "\\u0062": 2}}')).toThrow(/duplicate key "b" at line 3, column 2/);
    // the same key in different objects, keys inside strings, and arrays are fine
    expect(parseJson('[{"a": 1}, {"a": 2, "s": "\\"a\\": {,"}]')).toEqual([{ a: 1 }, { a: 2, s: '"a": {,' }]);
    expect(parseJson('{"a": [1, {"a": 2}], "b": {"a": 3}}')).toEqual({ a: [1, { a: 2 }], b: { a: 3 } });
    expect(() => parseJson('{"a": 1,')).toThrow(SyntaxError);
  });

  it('sonde record refuses a JSON modulation spec and a model sidecar with a duplicate key (exit 2, one line)', async () => {
    const model = join(dir, 'dup.onnx');
    writeFileSync(model, buildTinyNet({ widths: [4, 4], classes: 2 }));
    const stim = writeStimuliNpy(dir, [2, 3, 16, 16], 2);
    const spec = join(dir, 'dup-spec.json');
    writeFileSync(spec, '{"site": "relu0", "kind": "uniform", "strength": 0.1, "strength": 10}');
    const modulated = await runSonde(['record', model, '--stimuli', stim.npy, '--out', join(dir, 'dup-mod'), '--modulate', spec]);
    expect(modulated.code).toBe(2);
    expect(modulated.stderr.trim().split('\n')).toHaveLength(1);
    expect(modulated.stderr).toMatch(/dup-spec\.json: not valid JSON \(duplicate key "strength" at line 1, column 55\)/);
    writeFileSync(join(dir, 'dup.json'), '{"outputs": {"name": "logits", "kinds": ["a", "b"], "name": "relu0"}}');
    const sidecar = await runSonde(['record', model, '--stimuli', stim.npy, '--out', join(dir, 'dup-base')]);
    expect(sidecar.code).toBe(2);
    expect(sidecar.stderr).toMatch(/sidecar .*dup\.json is not valid JSON \(duplicate key "name"/);
  });
});

describe('names that are not valid UTF-8', () => {
  it('sonde layers refuses a model whose tensor name is not valid UTF-8, naming the node (exit 2, no crash)', async () => {
    const proto = onnx.ModelProto.decode(buildTinyNet({ widths: [4, 4], classes: 2 }));
    const bytes = Buffer.from(onnx.ModelProto.encode(proto).finish());
    // rename tensor "conv1" to "conv\xff" in place (same length): 0xff is never valid in UTF-8 (RFC 3629 §1)
    let patched = 0;
    for (let i = bytes.indexOf('conv1'); i >= 0; i = bytes.indexOf('conv1', i + 1)) {
      bytes[i + 4] = 0xff;
      patched++;
    }
    expect(patched).toBeGreaterThanOrEqual(2); // the tensor, read by relu1_node, and the node name conv1_node
    const model = join(dir, 'badname.onnx');
    writeFileSync(model, bytes);
    const result = await runSonde(['layers', model]);
    expect(result.code).toBe(2);
    expect(result.stderr.trim().split('\n')).toHaveLength(1);
    expect(result.stderr).toMatch(/tensor name "conv\uFFFD" \(output of node "conv\uFFFD_node"\) is not valid UTF-8/);
  });

  it('sonde record refuses an image folder entry and a labels CSV that are not valid UTF-8, showing the bytes', async () => {
    const model = join(dir, 'names.onnx');
    writeFileSync(model, buildTinyNet({ widths: [4, 4], classes: 2 }));
    const folder = join(dir, 'images');
    mkdirSync(join(folder, 'cat'), { recursive: true });
    writeFileSync(Buffer.from(`${join(folder, 'cat')}/a\xff.png`, 'latin1'), 'not read');
    const images = await runSonde(['record', model, '--stimuli', folder, '--out', join(dir, 'names-out')]);
    expect(images.code).toBe(2);
    expect(images.stderr).toMatch(/has a name that is not valid UTF-8 \(.*bytes 61ff2e706e67\)/);
    const stim = writeStimuliNpy(dir, [2, 3, 16, 16], 3);
    writeFileSync(stim.labels, Buffer.from('label\ncat\nd\xe9j\xe0\n', 'latin1'));
    const labels = await runSonde(['record', model, '--stimuli', stim.npy, '--labels', stim.labels, '--out', join(dir, 'names-out2')]);
    expect(labels.code).toBe(2);
    expect(labels.stderr).toMatch(/--labels .*labels\.csv is not valid UTF-8 \(first invalid byte near offset 11\)/);
  });
});

describe('the runtime\'s own log lines', () => {
  it('sonde layers prints none of onnxruntime\'s native warnings (here "Removing initializer") unless SONDE_RUNTIME_LOG asks for them', async () => {
    ensureBuilt();
    const proto = onnx.ModelProto.decode(buildTinyNet({ widths: [4, 4], classes: 2 }));
    proto.graph!.initializer!.push({ name: 'unused_weight', dims: [2], dataType: 1, rawData: new Uint8Array(8) });
    const model = join(dir, 'unused.onnx');
    writeFileSync(model, onnx.ModelProto.encode(proto).finish());
    const quiet = await finished(startSonde(['layers', model]));
    expect(quiet.code).toBe(0);
    expect(quiet.stderr).toBe('');
    process.env['SONDE_RUNTIME_LOG'] = 'warning';
    let loud;
    try {
      loud = await finished(startSonde(['layers', model]));
    } finally {
      delete process.env['SONDE_RUNTIME_LOG'];
    }
    // the control: the runtime does warn about this model, it is only kept off the terminal by default
    expect(loud.stderr).toMatch(/Removing initializer 'unused_weight'/);
  });
});
