import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { parseFit, parseInterpolation, parseNormalise, pixelsToPlanar, presetValues, resolvedFit, type Preprocessing } from '../../src/stimuli/preprocess.js';

describe('presetValues', () => {
  it('presetValues imagenet gives the ImageNet RGB mean and std (torchvision model documentation, common practice)', () => {
    expect(presetValues('imagenet', 3)).toEqual({ mean: [0.485, 0.456, 0.406], std: [0.229, 0.224, 0.225] });
  });

  it('presetValues unit and signed map pixel 0 and 1 to the ends of [0, 1] and [−1, 1] (exact)', () => {
    for (const [preset, low, high] of [['unit', 0, 1], ['signed', -1, 1]] as const) {
      const { mean, std } = presetValues(preset, 3);
      expect((0 - mean[0]!) / std[0]!).toBe(low);
      expect((1 - mean[2]!) / std[2]!).toBe(high);
    }
    expect(presetValues('signed', 1)).toEqual({ mean: [0.5], std: [0.5] });
  });

  it('presetValues refuses imagenet for a one-channel model', () => {
    expect(() => presetValues('imagenet', 1)).toThrow(/has 3 values .* 1 channels/);
  });
});

describe('parseFit / parseInterpolation / parseNormalise', () => {
  it('parseFit reads the three modes and crop:S', () => {
    expect(parseFit('squash')).toEqual({ fit: 'squash' });
    expect(parseFit('letterbox')).toEqual({ fit: 'letterbox' });
    expect(parseFit('crop')).toEqual({ fit: 'crop' });
    expect(parseFit('crop:256')).toEqual({ fit: 'crop', shorterSide: 256 });
  });

  it('parseFit, parseInterpolation and parseNormalise refuse unknown values with the closest name', () => {
    expect(() => parseFit('crp')).toThrow(/--fit "crp" is not a fit mode/);
    expect(() => parseFit('letterbox:3')).toThrow(UsageError);
    try {
      parseInterpolation('bilinar');
    } catch (error) {
      expect((error as UsageError).hint).toMatch(/closest: "bilinear"/);
    }
    expect(() => parseInterpolation('bilinar')).toThrow(/not an interpolation kernel/);
    expect(() => parseNormalise('imagnet')).toThrow(/not a normalisation preset/);
    expect(parseNormalise('imagenet')).toBe('imagenet');
  });
});

describe('resolvedFit', () => {
  it('resolvedFit fills what manifests of older builds lack with what those builds did (squash, lanczos3)', () => {
    expect(resolvedFit({ size: [8, 8], mean: [0], std: [1], bgr: false })).toEqual({ fit: 'squash', shorterSide: 8, interpolation: 'lanczos3' });
  });

  it('resolvedFit refuses an unknown fit read from a manifest', () => {
    expect(() => resolvedFit({ size: [8, 8], mean: [0], std: [1], bgr: false, fit: 'zoom' as never })).toThrow(/fit "zoom"/);
  });
});

describe('pixelsToPlanar', () => {
  it('pixelsToPlanar normalises x = (p/255 − mean) / std per channel and reverses the channels for BGR (exact arithmetic)', () => {
    // two pixels, HWC: (255, 0, 51), (102, 204, 0)
    const pixels = Uint8Array.from([255, 0, 51, 102, 204, 0]);
    const prep: Preprocessing = { size: [1, 2], mean: [0.5, 0.25, 0], std: [0.5, 0.25, 2], bgr: false };
    const out = new Float32Array(6);
    pixelsToPlanar({ pixels, height: 1, width: 2, channels: 3, maxValue: 255, top: 0, left: 0 }, prep, out, 0);
    const expected = [(1 - 0.5) / 0.5, (102 / 255 - 0.5) / 0.5, (0 - 0.25) / 0.25, (204 / 255 - 0.25) / 0.25, 51 / 255 / 2, 0];
    expected.forEach((v, i) => expect(out[i]).toBeCloseTo(v, 6));
    const bgr = new Float32Array(6);
    pixelsToPlanar({ pixels, height: 1, width: 2, channels: 3, maxValue: 255, top: 0, left: 0 }, { ...prep, bgr: true }, bgr, 0);
    // first fed plane is the blue channel, normalised with the first mean/std
    expect(bgr[0]).toBeCloseTo((51 / 255 - 0.5) / 0.5, 6);
    expect(bgr[4]).toBeCloseTo(1 / 2, 6);
  });
});
