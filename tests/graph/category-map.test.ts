/**
 * readReadoutMap and resolveReadoutMap (src/graph/category-map.ts): the two written forms, resolution of
 * names, indices and ranges against a readout, and one clear line for each mistake (a category with no
 * units, a unit named twice, an unknown unit name or index). The unit lists are checked against sets
 * built independently of the parser (plain loops over the ranges as written).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { describeMapTag, mapTag, readReadoutMap, resolveReadoutMap } from '../../src/graph/category-map.js';
import { UsageError } from '../../src/errors.js';
import { tempFolder } from '../helpers/onnx-builder.js';

const names = Array.from({ length: 1000 }, (_, u) => (u === 281 ? 'tabby' : u === 282 ? 'tiger cat' : `class ${u}`));
const readout = { tensor: 'logits', width: 1000, names };
const range = (a: number, b: number) => Array.from({ length: b - a + 1 }, (_, i) => a + i);

function refusal(run: () => unknown): UsageError {
  try {
    run();
  } catch (error) {
    expect(error).toBeInstanceOf(UsageError);
    expect((error as UsageError).exitCode).toBe(2);
    expect((error as UsageError).message).not.toMatch(/\n/);
    return error as UsageError;
  }
  throw new Error('expected a refusal');
}

describe('readReadoutMap', () => {
  it('readReadoutMap reads a JSON file (object of lists, or one entry) and an inline text to the same entries, many-to-one', () => {
    const dir = tempFolder();
    const file = join(dir, 'animals.json');
    writeFileSync(file, JSON.stringify({ dog: ['151..268'], cat: [281, 'tiger cat', '283..285'], ring: 7 }));
    const fromFile = readReadoutMap(file);
    expect(fromFile.name).toBe('animals.json');
    expect(fromFile.entries).toEqual([{ category: 'dog', units: ['151..268'] }, { category: 'cat', units: [281, 'tiger cat', '283..285'] }, { category: 'ring', units: [7] }]);
    const inline = readReadoutMap('dog=151..268; cat=281,tiger cat,283..285 ;ring=7');
    expect(inline.entries[1]!.units).toEqual([281, 'tiger cat', '283..285']);
    expect(inline.name).toBe('inline');
    const a = resolveReadoutMap(fromFile, readout);
    const b = resolveReadoutMap(inline, readout);
    expect(a.categories).toEqual(['dog', 'cat', 'ring']);
    expect(a.groups).toEqual([range(151, 268), [281, 282, 283, 284, 285], [7]]);
    expect(a.groups[0]!.length).toBe(118);
    expect(b.groups).toEqual(a.groups);
    expect(a.sha256).toMatch(/^[0-9a-f]{64}$/);
    // the digest is of the entries as written: the same file content gives the same digest, another map another one
    expect(readReadoutMap(file).sha256).toBe(fromFile.sha256);
    expect(readReadoutMap('dog=151..267').sha256).not.toBe(readReadoutMap('dog=151..268').sha256);
    // the inline form of a file's entries is the same map
    expect(inline.sha256).toBe(fromFile.sha256);
    expect(mapTag(fromFile)).toEqual({ name: 'animals.json', sha256: fromFile.sha256 });
    expect(describeMapTag(mapTag(fromFile))).toBe(`animals.json sha256:${fromFile.sha256.slice(0, 12)}`);
    expect(describeMapTag(null)).toMatch(/no readout map/);
  });

  it('readReadoutMap refuses, one line each: a category with no units, a category named twice, a malformed entry, not JSON, a list, a missing file', () => {
    const dir = tempFolder();
    expect(refusal(() => readReadoutMap('dog=;cat=281')).message).toMatch(/category "dog" lists no units/);
    const empty = join(dir, 'empty.json');
    writeFileSync(empty, JSON.stringify({ dog: [], cat: [281] }));
    expect(refusal(() => readReadoutMap(empty)).message).toMatch(/category "dog" lists no units/);
    expect(refusal(() => readReadoutMap('dog=1;dog=2')).message).toMatch(/"dog" is named twice/);
    const twice = join(dir, 'twice.json');
    writeFileSync(twice, '{"dog": [1], "dog": [2]}');
    expect(refusal(() => readReadoutMap(twice)).message).toMatch(/not valid JSON.*dog/);
    const bad = join(dir, 'bad.json');
    writeFileSync(bad, JSON.stringify({ dog: [1.5] }));
    expect(refusal(() => readReadoutMap(bad)).message).toMatch(/"dog" lists 1\.5; a unit is an integer index/);
    const list = join(dir, 'list.json');
    writeFileSync(list, '[1, 2]');
    expect(refusal(() => readReadoutMap(list)).message).toMatch(/must be a JSON object.*got a list/);
    expect(refusal(() => readReadoutMap(join(dir, 'missing.json'))).message).toMatch(/no such file, and not an inline map/);
    expect(refusal(() => readReadoutMap('dog')).message).toMatch(/no such file/);
    expect(refusal(() => readReadoutMap('dog=1;cat')).message).toMatch(/"cat" has no "="/);
  });
});

describe('resolveReadoutMap', () => {
  it('resolveReadoutMap refuses, one line each: a unit named twice (within and across categories), an unknown name with the closest, an index or range outside the readout, a backwards range', () => {
    const twiceAcross = refusal(() => resolveReadoutMap(readReadoutMap('dog=151..268;wolf=260..270'), readout));
    expect(twiceAcross.message).toMatch(/unit 260 \("class 260"\) is listed for both "dog" and "wolf"/);
    expect(refusal(() => resolveReadoutMap(readReadoutMap('cat=281,tabby'), readout)).message).toMatch(/unit 281 \("tabby"\) is listed twice for "cat"/);
    const unknown = refusal(() => resolveReadoutMap(readReadoutMap('cat=tabbby'), readout));
    expect(unknown.message).toMatch(/"tabbby", which is not a unit of readout "logits" \(1000 units, indices 0–999: class 0, .*closest: "tabby"/);
    expect(unknown.message.length).toBeLessThan(400);
    expect(refusal(() => resolveReadoutMap(readReadoutMap('dog=1000'), readout)).message).toMatch(/lists 1000, outside readout "logits" \(1000 units, indices 0–999\)/);
    expect(refusal(() => resolveReadoutMap(readReadoutMap('dog=990..1005'), readout)).message).toMatch(/"990\.\.1005", outside readout/);
    expect(refusal(() => resolveReadoutMap(readReadoutMap('dog=20..10'), readout)).message).toMatch(/runs backwards/);
    // without unit names only indices resolve, and the message says why
    expect(refusal(() => resolveReadoutMap(readReadoutMap('cat=tabby'), { tensor: 'logits', width: 1000, names: null })).message).toMatch(/no unit names: no sidecar names every unit/);
    expect(resolveReadoutMap(readReadoutMap('cat=281'), { tensor: 'logits', width: 1000, names: null }).groups).toEqual([[281]]);
  });

  it('resolveReadoutMap: in a file a string of digits is a unit name first, a JSON integer (or inline digits) an index; units not listed are ignored', () => {
    const numeric = Array.from({ length: 10 }, (_, u) => String(9 - u)); // unit u is named "9 − u"
    const file = join(tempFolder(), 'numeric.json');
    writeFileSync(file, JSON.stringify({ a: ['0'], b: ['7..8'], c: [1] }));
    const resolved = resolveReadoutMap(readReadoutMap(file), { tensor: 'y', width: 10, names: numeric });
    expect(resolved.groups).toEqual([[9], [7, 8], [1]]);
    expect(resolveReadoutMap(readReadoutMap('a=0'), { tensor: 'y', width: 10, names: numeric }).groups).toEqual([[0]]);
    expect(resolved.groups.flat().length).toBe(4);
  });
});
