/**
 * axisNames: the axis-naming rule of export.json, decided once and written down (DEVELOPERS/README):
 * stimulus first; the first per-stimulus axis is Sonde's channel axis (the one channel means keep, as
 * `channelCount` in src/snapshot/layer-file.ts takes it); a three-axis tensor is channel × y × x (ONNX's
 * NCHW for feature maps, common practice); other axes by position.
 */
import { describe, expect, it } from 'vitest';
import { axisNames } from '../../src/export/export-description.js';
import { channelCount } from '../../src/snapshot/layer-file.js';

describe('axisNames', () => {
  it('axisNames names a feature map stimulus, channel, y, x and other ranks by position', () => {
    expect(axisNames(3)).toEqual(['stimulus', 'channel', 'y', 'x']);
    expect(axisNames(1)).toEqual(['stimulus', 'channel']);
    expect(axisNames(2)).toEqual(['stimulus', 'channel', 'axis2']);
    expect(axisNames(4)).toEqual(['stimulus', 'channel', 'axis2', 'axis3', 'axis4']);
    expect(axisNames(0)).toEqual(['stimulus']);
  });

  it('axisNames gives one name per axis of [stimuli, ...shape], and its channel axis is the one channelCount counts', () => {
    for (const shape of [[5], [197, 768], [64, 56, 56], [2, 3, 4, 5]]) {
      const names = axisNames(shape.length);
      expect(names).toHaveLength(shape.length + 1);
      expect(new Set(names).size).toBe(names.length);
      expect([10, ...shape][names.indexOf('channel')]).toBe(channelCount(shape));
    }
  });
  it('axisNames follows the layout: token × feature, y × x × channel for NHWC, head on the heads axis', () => {
    expect(axisNames(2, { kind: 'tokens', featureAxis: 1, source: 'graph' })).toEqual(['stimulus', 'token', 'feature']);
    expect(axisNames(3, { kind: 'channels-last', featureAxis: 2, source: 'graph' })).toEqual(['stimulus', 'y', 'x', 'channel']);
    expect(axisNames(3, { kind: 'heads', featureAxis: 0, source: 'graph' })).toEqual(['stimulus', 'head', 'axis2', 'axis3']);
    expect(axisNames(3, { kind: 'channels-first', featureAxis: 0, source: 'graph' })).toEqual(['stimulus', 'channel', 'y', 'x']);
  });
});
