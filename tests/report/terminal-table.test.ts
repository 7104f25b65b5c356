/**
 * Terminal tables and text that fit a width. Exact properties: no line wider than the width (counted
 * in terminal cells with string-width, the measure cli-table3 itself uses), every cell of the input
 * appears in some part, key columns are repeated in every part, and a table that fits is left whole.
 */
import stringWidth from 'string-width';
import { describe, expect, it } from 'vitest';
import { fitTable, textWidth, wrapText } from '../../src/report/terminal-table.js';

const widest = (text: string) => Math.max(...text.split('\n').map((l) => stringWidth(l)));

describe('fitTable', () => {
  it('fitTable: a table of 13 columns is split into parts no wider than 80 cells, each repeating the key column, every cell kept in order', () => {
    const head = ['category', ...Array.from({ length: 12 }, (_, i) => `measure ${i} [95 % CI]`)];
    const rows = ['disc', 'ring', 'cross', 'mean'].map((name, r) => [name, ...Array.from({ length: 12 }, (_, i) => `+0.${r}${i}1 [−0.0${i}, +0.1${r}]`)]);
    const text = fitTable(head, rows, { width: 80 });
    expect(widest(text)).toBeLessThanOrEqual(80);
    const parts = text.split('\n\n');
    expect(parts.length).toBeGreaterThan(1);
    for (const part of parts) for (const name of ['disc', 'ring', 'cross', 'mean']) expect(part).toContain(name);
    for (const row of rows) for (const cell of row.slice(1)) expect(text).toContain(cell);
    // columns keep their order: measure 0 comes before measure 11
    expect(text.indexOf('measure 0 ')).toBeLessThan(text.indexOf('measure 11'));
  });

  it('fitTable: a table that fits is one table (no split)', () => {
    const text = fitTable(['a', 'b'], [['1', '2']], { width: 80 });
    expect(text.split('\n\n')).toHaveLength(1);
    expect(textWidth(text)).toBeLessThan(20);
  });

  it('fitTable: a key column too long for the width is shortened with an ellipsis so lines fit', () => {
    const long = '/features/features.16/conv/conv.1/conv.1.2/Clip_output_0/and/some/more/segments/to/make/it/long';
    const text = fitTable(['layer', 'change'], [[long, '0.123']], { width: 60 });
    expect(widest(text)).toBeLessThanOrEqual(60);
    expect(text).toContain('…');
    expect(text).toContain('0.123');
  });
});

describe('wrapText', () => {
  it('wrapText: no line exceeds the width; words stay whole and in order; continuation lines are indented', () => {
    const text = 'tuning − shuffled at /conv1/relu/Relu_output_0: ΔAUC −0.021 [−0.062, +0.007] (interval includes 0 or lies below) and some further words to wrap';
    const wrapped = wrapText(text, 40, '  ');
    expect(widest(wrapped)).toBeLessThanOrEqual(40);
    expect(wrapped.split('\n').slice(1).every((l) => l.startsWith('  '))).toBe(true);
    expect(wrapped.replace(/\n {2}/g, ' ')).toBe(text);
  });

  it('wrapText: a word longer than the width is cut across lines', () => {
    const wrapped = wrapText(`x ${'a'.repeat(100)}`, 30);
    expect(widest(wrapped)).toBeLessThanOrEqual(30);
    expect(wrapped.replace(/\n/g, '')).toBe(`x${'a'.repeat(100)}`.replace('x', 'x'));
  });
});
