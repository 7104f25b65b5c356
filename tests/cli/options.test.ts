import { InvalidArgumentError } from 'commander';
import { describe, expect, it } from 'vitest';
import { siteList } from '../../src/cli/options.js';

describe('siteList', () => {
  it('siteList splits commas and adds up repeated options, the one convention of --sites (sense, sweep)', () => {
    expect(siteList('a,b', undefined)).toEqual(['a', 'b']);
    expect(siteList(' c ', siteList('a, b', undefined))).toEqual(['a', 'b', 'c']);
    expect(() => siteList('a,,b', undefined)).toThrow(InvalidArgumentError);
    expect(() => siteList('a,,b', undefined)).toThrow(/empty site name; separate site tensors with commas/);
  });
});
