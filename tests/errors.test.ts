import { describe, expect, it } from 'vitest';
import { firstDifference, nameList } from '../src/errors.js';

describe('nameList', () => {
  it('nameList lists up to the limit and then the count', () => {
    expect(nameList(['a', 'b'])).toBe('a, b');
    expect(nameList(Array.from({ length: 1000 }, (_, i) => String(i)), 3)).toBe('0, 1, 2, … (1000 in all)');
  });
});

describe('firstDifference', () => {
  it('firstDifference names the first name missing from either list, and null for the same set in another order', () => {
    expect(firstDifference(['dog', 'cat'], ['cat', 'fox', 'dog'], 'A', 'B')).toBe('"fox" is in B but not in A');
    expect(firstDifference(['dog', 'cat'], ['cat'], 'A', 'B')).toBe('"dog" is in A but not in B');
    expect(firstDifference(['dog', 'cat'], ['cat', 'dog'], 'A', 'B')).toBeNull();
  });
});
