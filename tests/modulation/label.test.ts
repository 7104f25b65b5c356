import { describe, expect, it } from 'vitest';
import { modulationWindows, tokensLabel, windowLabel } from '../../src/modulation/label.js';

describe('windowLabel', () => {
  it('windowLabel names the shape, its place and size, and a gain outside other than 1', () => {
    expect(windowLabel({ shape: 'gaussian', cx: 0.3, cy: 0.5, sigma: 0.15, outside: 1 })).toBe('gaussian window at (0.3, 0.5) σ 0.15');
    expect(windowLabel({ shape: 'box', x0: 0, x1: 0.5, y0: 0.25, y1: 1, outside: 0.8 })).toBe('box window x 0–0.5, y 0.25–1, outside ×0.8');
    expect(windowLabel(null)).toBeNull();
    expect(windowLabel({ shape: 'disc' })).toBeNull();
  });
});

describe('modulationWindows', () => {
  it('modulationWindows lists windowed sites only, naming the site when there are several', () => {
    const gaussian = { shape: 'gaussian', cx: 0.5, cy: 0.5, sigma: 0.2, outside: 1 };
    expect(modulationWindows({ modulations: [{ site: 'relu1', window: null }] })).toEqual([]);
    expect(modulationWindows({ modulations: [{ site: 'relu1', window: gaussian }] })).toEqual(['gaussian window at (0.5, 0.5) σ 0.2']);
    expect(modulationWindows({ modulations: [{ site: 'relu0', window: null }, { site: 'relu1', window: gaussian }] })).toEqual(['gaussian window at (0.5, 0.5) σ 0.2 at relu1']);
    expect(modulationWindows(null)).toEqual([]);
  });
});

describe('tokensLabel', () => {
  it('tokensLabel names the chosen tokens and a gain elsewhere other than 1; modulationWindows lists token selections like windows', () => {
    expect(tokensLabel({ at: ['class', [1, 2], 5], outside: 1 })).toBe('token selection class, patch [1, 2], token 5');
    expect(tokensLabel({ at: ['patches'], outside: 0.5 })).toBe('token selection every patch, outside ×0.5');
    expect(tokensLabel(null)).toBeNull();
    expect(tokensLabel({ at: [] })).toBeNull();
    expect(modulationWindows({ modulations: [{ site: 'block0', window: null, tokens: { at: ['class'], outside: 1 } }] })).toEqual(['token selection class']);
  });
});
