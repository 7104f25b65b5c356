import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import sharp from 'sharp';
import { beforeAll, describe, expect, it } from 'vitest';
import { buildTinyNet, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir = '';
let model = '';
let images = '';

beforeAll(async () => {
  dir = tempFolder('sonde-record-prep-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet());
  images = join(dir, 'photos');
  for (const [k, category] of ['cat', 'dog'].entries()) {
    mkdirSync(join(images, category), { recursive: true });
    for (let i = 0; i < 2; i++) {
      const raw = Buffer.alloc(30 * 20 * 3);
      for (let p = 0; p < raw.length; p++) raw[p] = (p * (7 + k) + 13 * i) % 256;
      await sharp(raw, { raw: { width: 30, height: 20, channels: 3 } }).png().toFile(join(images, category, `${i}.png`));
    }
  }
});

const manifest = (out: string): { stimuli: { digest: string }; preprocessing: Record<string, unknown> } => JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8'));

describe('sonde record (preprocessing options)', () => {
  it('sonde record --fit crop:20 --interpolation bilinear --normalise imagenet writes every field into the manifest', async () => {
    const out = join(dir, 'crop');
    const result = await runSonde(['record', model, '--stimuli', images, '--out', out, '--fit', 'crop:20', '--interpolation', 'bilinear', '--normalise', 'imagenet', '--threads', '1']);
    expect(result.code, result.stderr).toBe(0);
    expect(manifest(out).preprocessing).toEqual({ size: [16, 16], mean: [0.485, 0.456, 0.406], std: [0.229, 0.224, 0.225], bgr: false, fit: 'crop', shorterSide: 20, interpolation: 'bilinear', normalise: 'imagenet' });
  });

  it('sonde record gives the same stimuli digest for the same preprocessing and another for another fit, kernel or normalisation', async () => {
    const digest = async (name: string, extra: string[]): Promise<string> => {
      const out = join(dir, name);
      const result = await runSonde(['record', model, '--stimuli', images, '--out', out, '--threads', '1', '--layers', 'relu0', ...extra]);
      expect(result.code, result.stderr).toBe(0);
      return manifest(out).stimuli.digest;
    };
    const squash = await digest('d-squash', []);
    expect(await digest('d-squash-again', ['--fit', 'squash', '--interpolation', 'lanczos3', '--normalise', 'unit'])).toBe(squash);
    const others = [await digest('d-crop', ['--fit', 'crop']), await digest('d-letterbox', ['--fit', 'letterbox']), await digest('d-nearest', ['--interpolation', 'nearest']), await digest('d-signed', ['--normalise', 'signed'])];
    expect(new Set([squash, ...others]).size).toBe(5);
    expect(manifest(join(dir, 'd-squash')).preprocessing).toMatchObject({ fit: 'squash', interpolation: 'lanczos3', normalise: 'unit' });
  });

  it('sonde record takes fit, interpolation and normalise from the model sidecar, options overriding it, and names a bad sidecar value', async () => {
    const side = join(dir, 'side.onnx');
    writeFileSync(side, buildTinyNet());
    writeFileSync(join(dir, 'side.json'), JSON.stringify({ preprocessing: { fit: 'crop:20', interpolation: 'bicubic', normalise: 'signed' } }));
    const out = join(dir, 'side-out');
    const first = await runSonde(['record', side, '--stimuli', images, '--out', out, '--threads', '1', '--layers', 'relu0']);
    expect(first.code, first.stderr).toBe(0);
    expect(manifest(out).preprocessing).toMatchObject({ fit: 'crop', shorterSide: 20, interpolation: 'bicubic', normalise: 'signed', mean: [0.5, 0.5, 0.5], std: [0.5, 0.5, 0.5] });
    const over = join(dir, 'side-over');
    expect((await runSonde(['record', side, '--stimuli', images, '--out', over, '--threads', '1', '--layers', 'relu0', '--fit', 'squash', '--mean', '0.1,0.1,0.1', '--std', '0.2,0.2,0.2'])).code).toBe(0);
    expect(manifest(over).preprocessing).toMatchObject({ fit: 'squash', interpolation: 'bicubic', normalise: 'custom', mean: [0.1, 0.1, 0.1], std: [0.2, 0.2, 0.2] });
    writeFileSync(join(dir, 'side.json'), JSON.stringify({ preprocessing: { fit: 'stretch' } }));
    const bad = await runSonde(['record', side, '--stimuli', images, '--out', join(dir, 'side-bad')]);
    expect(bad.code).toBe(2);
    expect(bad.stderr).toMatch(/model sidecar preprocessing\.fit "stretch" is not a fit mode/);
  });

  it('sonde record says in one notice that image options do not apply to a .npy array (fed as it is; manifest preprocessing null)', async () => {
    const folder = join(dir, 'arr');
    mkdirSync(folder);
    const { npy } = writeStimuliNpy(folder, [2, 3, 16, 16]);
    const out = join(dir, 'npy-out');
    const result = await runSonde(['record', model, '--stimuli', npy, '--out', out, '--normalise', 'imagenet', '--fit', 'crop', '--threads', '1', '--layers', 'relu0']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stderr.trim().split('\n')).toHaveLength(1);
    expect(result.stderr).toMatch(/is an array and is fed as it is; fit, normalise apply to images only/);
    expect(manifest(out).preprocessing).toBeNull();
  });

  it('sonde record refuses --normalise with --mean, an unknown fit and a shorter side below the input size, in one line (exit 2)', async () => {
    for (const [args, pattern] of [
      [['--normalise', 'imagenet', '--mean', '0.5'], /--normalise imagenet sets the mean and std; it cannot be combined with --mean or --std/],
      [['--fit', 'zoom'], /--fit "zoom" is not a fit mode/],
      [['--fit', 'crop:8'], /--fit crop:8: the shorter side must be a whole number ≥ the input's larger side 16/],
      [['--interpolation', 'cubic'], /--interpolation "cubic" is not an interpolation kernel/],
    ] as const) {
      const result = await runSonde(['record', model, '--stimuli', images, '--out', join(dir, 'bad'), ...args]);
      expect(result.code, result.stderr).toBe(2);
      expect(result.stderr.trim().split('\n')).toHaveLength(1);
      expect(result.stderr).toMatch(pattern);
    }
  });
});
