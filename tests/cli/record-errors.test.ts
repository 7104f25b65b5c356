import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import sharp from 'sharp';
import { beforeAll, describe, expect, it } from 'vitest';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let npy: { npy: string; labels: string };

beforeAll(() => {
  dir = tempFolder();
  model = join(dir, 'tiny.onnx');
  writeFileSync(model, buildTinyNet());
  npy = writeStimuliNpy(dir, [6, 3, 16, 16]);
});

/** Every failure is one line on stderr, no stack, the right exit code, and no complete snapshot. */
async function expectFailure(args: string[], code: 1 | 2, pattern: RegExp, out?: string) {
  const result = await runSonde(args);
  expect(result.code, result.stderr).toBe(code);
  expect(result.stderr.trim().split('\n')).toHaveLength(1);
  expect(result.stderr).toMatch(pattern);
  expect(result.stderr).not.toMatch(/\n\s+at /);
  if (out && existsSync(join(out, 'manifest.json'))) expect(JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')).complete).toBe(false);
}

describe('sonde record (bad input)', () => {
  it('sonde record with a missing model says it does not exist (exit 2)', async () => {
    await expectFailure(['record', join(dir, 'nope.onnx'), '--stimuli', npy.npy, '--out', join(dir, 'o1')], 2, /nope\.onnx does not exist/);
  });

  it('sonde record with a folder as model says so (exit 2)', async () => {
    await expectFailure(['record', dir, '--stimuli', npy.npy, '--out', join(dir, 'o2')], 2, /is a directory/);
  });

  it('sonde record with a non-ONNX file says it is not valid ONNX (exit 2)', async () => {
    const junk = join(dir, 'junk.onnx');
    writeFileSync(junk, 'this is not a protobuf at all, just text that goes on and on');
    await expectFailure(['record', junk, '--stimuli', npy.npy, '--out', join(dir, 'o3')], 2, /not a valid ONNX file/);
  });

  it('sonde record with a truncated model says it is not valid ONNX (exit 2)', async () => {
    const bytes = buildTinyNet();
    const cut = join(dir, 'cut.onnx');
    writeFileSync(cut, bytes.subarray(0, Math.floor(bytes.length * 0.6)));
    await expectFailure(['record', cut, '--stimuli', npy.npy, '--out', join(dir, 'o4')], 2, /not a valid ONNX file|nothing produces|no graph/);
  });

  it('sonde record with an empty model file says it is empty (exit 2)', async () => {
    const empty = join(dir, 'empty.onnx');
    writeFileSync(empty, '');
    await expectFailure(['record', empty, '--stimuli', npy.npy, '--out', join(dir, 'o5')], 2, /empty/);
  });

  it('sonde layers on a dynamic-size model without --input-shape asks for it (exit 2)', async () => {
    const dyn = join(dir, 'dyn.onnx');
    writeFileSync(dyn, buildTinyNet({ dynamicSpatial: true }));
    await expectFailure(['layers', dyn], 2, /dynamic axes.*--input-shape/);
    const ok = await runSonde(['layers', dyn, '--input-shape', '1x3x16x16', '--json']);
    expect(ok.code).toBe(0);
    expect(JSON.parse(ok.stdout).input.shape).toEqual([1, 3, 16, 16]);
  });

  it('sonde record names an image that fails to decode (exit 2)', async () => {
    const images = join(dir, 'imgs');
    mkdirSync(join(images, 'a'), { recursive: true });
    await sharp(Buffer.alloc(16 * 16 * 3, 9), { raw: { width: 16, height: 16, channels: 3 } }).png().toFile(join(images, 'a', 'good.png'));
    writeFileSync(join(images, 'a', 'broken.png'), 'not really a png');
    // a second category: a single-category tree adds a notice line to stderr
    mkdirSync(join(images, 'b'));
    await sharp(Buffer.alloc(16 * 16 * 3, 200), { raw: { width: 16, height: 16, channels: 3 } }).png().toFile(join(images, 'b', 'good.png'));
    const out = join(dir, 'o6');
    await expectFailure(['record', model, '--stimuli', images, '--out', out], 2, /cannot decode image .*broken\.png/, out);
  });

  it('sonde record refuses a .npy whose channel count or size does not fit the model (exit 2)', async () => {
    const sub = join(dir, 'wrongc');
    mkdirSync(sub);
    const wrongChannels = writeStimuliNpy(sub, [2, 1, 16, 16]);
    await expectFailure(['record', model, '--stimuli', wrongChannels.npy, '--out', join(dir, 'o7')], 2, /1 channels but the model input has 3/);
    const sub2 = join(dir, 'wrongs');
    mkdirSync(sub2);
    const wrongSize = writeStimuliNpy(sub2, [2, 3, 8, 8]);
    await expectFailure(['record', model, '--stimuli', wrongSize.npy, '--out', join(dir, 'o8')], 2, /8x8 arrays but the model input is 16x16/);
  });

  it('sonde record refuses an empty stimulus source (exit 2)', async () => {
    const empty = join(dir, 'nostim');
    mkdirSync(empty);
    await expectFailure(['record', model, '--stimuli', empty, '--out', join(dir, 'o9')], 2, /holds no images/);
    const csv = join(dir, 'empty.csv');
    writeFileSync(csv, 'path,label\n');
    await expectFailure(['record', model, '--stimuli', csv, '--out', join(dir, 'o10')], 2, /lists no stimuli/);
  });

  it('sonde record rejects an unknown selector and lists close names (exit 2)', async () => {
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', join(dir, 'o11'), '--layers', 'relu7'], 2, /tensor "relu7" not found.*closest: "relu[0-9]"/);
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', join(dir, 'o12'), '--layers', 'op:Rellu'], 2, /operator "Rellu".*closest: "Relu"/);
  });

  it('sonde record refuses an --out that holds a complete snapshot unless --force (exit 2)', async () => {
    const out = join(dir, 'o13');
    expect((await runSonde(['record', model, '--stimuli', npy.npy, '--out', out])).code).toBe(0);
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', out], 2, /already holds a complete snapshot.*--force/);
    expect((await runSonde(['record', model, '--stimuli', npy.npy, '--out', out, '--force'])).code).toBe(0);
  });

  it('sonde record reports a write error as one line (exit 1)', async () => {
    const blocker = join(dir, 'a-file');
    writeFileSync(blocker, 'x');
    const result = await runSonde(['record', model, '--stimuli', npy.npy, '--out', join(blocker, 'snap')]);
    expect(result.code).not.toBe(0);
    expect(result.stderr.trim().split('\n')).toHaveLength(1);
    expect(result.stderr).toMatch(/a-file/);
  });

  it('sonde record rejects a bad option value before doing any work (exit 2)', async () => {
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', join(dir, 'o14'), '--batch', '0'], 2, /--batch/);
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', join(dir, 'o15'), '--keep', 'some'], 2, /--keep must be/);
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', join(dir, 'o16'), '--mean', '0.5,x'], 2, /--mean/);
    await expectFailure(['record', model, '--stimuli', npy.npy, '--out', join(dir, 'o17'), '--compress', 'gzip'], 2, /--compress must be one of none, lz4, zstd, got "gzip"/);
    expect(existsSync(join(dir, 'o17'))).toBe(false);
  });
});
