import { existsSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { tableFromArrays, tableFromIPC, tableToIPC } from 'apache-arrow';
import pl from 'nodejs-polars';
import { beforeAll, describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import {
  readSensitivityTable, readTuningTable, writeSensitivityTable, writeTuningTable, type SensitivityTableBlock, type TuningTableBlock,
} from '../../src/snapshot/tables.js';
import { tempFolder } from '../helpers/onnx-builder.js';

let dir: string;

// Two layers × 2 channels × 3 categories; channel 1 of each layer has no preference (zero variance),
// one standard error is NaN (a category with a single stimulus).
function tuningBlock(layer: string, depth: number, shift: number): TuningTableBlock {
  return {
    layer,
    depth,
    op: 'Relu',
    channels: 2,
    categories: ['disc', 'ring', 'cross'],
    mean: new Float64Array([1 + shift, 2 + shift, 4.5 + shift, 3, 3, 3]),
    sem: new Float64Array([0.25, 0.5, Number.NaN, 0, 0, Number.NaN]),
    count: new Int32Array([4, 2, 1]),
    tuning: new Float64Array([-1.0690449676496976, -0.26726124191242434, 1.3363062095621219, 0, 0, 0]),
    preferred: new Int32Array([2, -1]),
    selectivity: new Float64Array([0.5, 0]),
    zeroVariance: new Uint8Array([0, 1]),
  };
}

function sensitivityBlock(layer: string): SensitivityTableBlock {
  return {
    layer,
    channels: 3,
    categories: ['disc', 'ring'],
    sensitivity: new Float64Array([0.5, -0.25, 1e-9, 3, -7, 0]),
    fdError: new Float64Array([1e-6, 2e-6, 0, 0.125, 1e-3, 0]),
    kind: 'offset',
    step: 0.01,
    count: new Int32Array([10, 7]),
  };
}

beforeAll(() => {
  dir = tempFolder();
});

describe('writeTuningTable / readTuningTable', () => {
  it('readTuningTable(writeTuningTable(blocks)) returns the blocks, NaN and "no preference" included', () => {
    const path = join(dir, 'tuning.arrow');
    const blocks = [tuningBlock('relu1', 3, 0), tuningBlock('relu2', 5, 10)];
    const written = writeTuningTable(path, blocks, { 'sonde.snapshot': 'somewhere' });
    expect(written.rows).toBe(12);
    const file = readTuningTable(path);
    expect(file.categories).toEqual(['disc', 'ring', 'cross']);
    expect(file.metadata['sonde.table']).toBe('tuning');
    expect(file.metadata['sonde.snapshot']).toBe('somewhere');
    expect(file.blocks.map((b) => b.layer)).toEqual(['relu1', 'relu2']);
    for (const [i, block] of file.blocks.entries()) {
      const original = blocks[i]!;
      expect(block.depth).toBe(original.depth);
      expect(block.op).toBe('Relu');
      expect(Array.from(block.mean)).toEqual(Array.from(original.mean));
      expect(Array.from(block.sem)).toEqual(Array.from(original.sem)); // toEqual treats NaN as equal to NaN
      expect(Array.from(block.tuning)).toEqual(Array.from(original.tuning));
      expect(Array.from(block.count)).toEqual([4, 2, 1]);
      expect(Array.from(block.preferred)).toEqual([2, -1]);
      expect(Array.from(block.selectivity)).toEqual([0.5, 0]);
      expect(Array.from(block.zeroVariance)).toEqual([0, 1]);
    }
    expect(file.block('relu2')).toBe(file.blocks[1]);
    expect(file.block('nope')).toBeUndefined();
    // written atomically: no temporary file is left behind
    expect(readdirSync(dir).filter((n) => n.endsWith('.partial'))).toEqual([]);
  });

  it('writeTuningTable files are read by nodejs-polars (buffer form) and apache-arrow with the decided columns and types', () => {
    const path = join(dir, 'tuning-polars.arrow');
    writeTuningTable(path, [tuningBlock('relu1', 3, 0)]);
    const frame = pl.readIPC(readFileSync(path));
    expect(frame.columns).toEqual(['layer', 'channel', 'category', 'mean', 'sem', 'n', 'tuning', 'preferred', 'selectivity', 'zero_variance']);
    expect(frame.dtypes.map(String)).toEqual(['String', 'Int32', 'String', 'Float64', 'Float64', 'Int32', 'Float64', 'String', 'Float64', 'Bool'].map((t) => `DataType(${t})`));
    expect(frame.height).toBe(6);
    // long format, channel-major: (channel 0: disc, ring, cross), (channel 1: ...)
    expect(frame.getColumn('channel').toArray()).toEqual([0, 0, 0, 1, 1, 1]);
    expect(frame.getColumn('category').toArray()).toEqual(['disc', 'ring', 'cross', 'disc', 'ring', 'cross']);
    expect(frame.getColumn('mean').toArray()).toEqual([1, 2, 4.5, 3, 3, 3]);
    expect(frame.getColumn('n').toArray()).toEqual([4, 2, 1, 4, 2, 1]);
    expect(frame.getColumn('preferred').toArray()).toEqual(['cross', 'cross', 'cross', null, null, null]);
    expect(frame.getColumn('zero_variance').toArray()).toEqual([false, false, false, true, true, true]);
    const table = tableFromIPC(readFileSync(path));
    expect(table.numRows).toBe(6);
    expect(Array.from(table.getChild('tuning')!.toArray() as Float64Array)).toEqual(Array.from(tuningBlock('relu1', 3, 0).tuning));
  });

  it('writeTuningTable rejects blocks with different category lists, a repeated layer, or arrays of the wrong length', () => {
    const a = tuningBlock('relu1', 3, 0);
    const b = { ...tuningBlock('relu2', 4, 0), categories: ['disc', 'ring', 'star'] };
    expect(() => writeTuningTable(join(dir, 'bad1.arrow'), [a, b])).toThrow(/layer "relu2" has 3 categories \(disc, ring, star\) but "relu1" has 3 \(disc, ring, cross\)/);
    expect(() => writeTuningTable(join(dir, 'bad2.arrow'), [a, a])).toThrow(/"relu1" appears twice/);
    expect(() => writeTuningTable(join(dir, 'bad3.arrow'), [{ ...a, mean: new Float64Array(5) }])).toThrow(/mean has 5 values, expected channels × categories = 2 × 3/);
    expect(() => writeTuningTable(join(dir, 'bad4.arrow'), [])).toThrow(UsageError);
    expect(existsSync(join(dir, 'bad1.arrow'))).toBe(false);
  });
});

describe('writeSensitivityTable / readSensitivityTable', () => {
  it('readSensitivityTable(writeSensitivityTable(blocks)) returns the blocks; Polars reads kind, step and n', () => {
    const path = join(dir, 'sens.arrow');
    writeSensitivityTable(path, [sensitivityBlock('site/a'), sensitivityBlock('site/b')], { 'sonde.readout': 'logits' });
    const file = readSensitivityTable(path);
    expect(file.categories).toEqual(['disc', 'ring']);
    expect(file.metadata['sonde.readout']).toBe('logits');
    const block = file.block('site/b')!;
    expect(Array.from(block.sensitivity)).toEqual(Array.from(sensitivityBlock('x').sensitivity));
    expect(Array.from(block.fdError)).toEqual(Array.from(sensitivityBlock('x').fdError));
    expect(block.kind).toBe('offset');
    expect(block.step).toBe(0.01);
    expect(Array.from(block.count)).toEqual([10, 7]);
    const frame = pl.readIPC(readFileSync(path));
    expect(frame.columns).toEqual(['layer', 'channel', 'category', 'sensitivity', 'fd_error', 'kind', 'step', 'n']);
    expect(frame.dtypes.map(String)).toEqual(['String', 'Int32', 'String', 'Float64', 'Float64', 'String', 'Float64', 'Int32'].map((t) => `DataType(${t})`));
    expect(frame.height).toBe(12);
    expect(frame.getColumn('sensitivity').toArray().slice(0, 6)).toEqual([0.5, -0.25, 1e-9, 3, -7, 0]);
    expect(frame.getColumn('n').toArray().slice(0, 2)).toEqual([10, 7]);
  });

  it('readSensitivityTable refuses a tuning table, a missing file, a missing column and an incomplete grid (one line each)', () => {
    const tuning = join(dir, 'tuning-for-refusal.arrow');
    writeTuningTable(tuning, [tuningBlock('relu1', 3, 0)]);
    expect(() => readSensitivityTable(tuning)).toThrow(/is a tuning table, not a sensitivity table/);
    expect(() => readSensitivityTable(join(dir, 'absent.arrow'))).toThrow(/does not exist/);
    // An Arrow file made by another writer: without fd_error, and with one row missing.
    const partial = tableFromArrays({ layer: ['s', 's', 's'], channel: Int32Array.from([0, 0, 1]), category: ['a', 'b', 'a'], sensitivity: Float64Array.from([1, 2, 3]) });
    const noColumn = join(dir, 'no-column.arrow');
    writeFileSync(noColumn, tableToIPC(partial, 'file'));
    expect(() => readSensitivityTable(noColumn)).toThrow(/lacks the "fd_error" column/);
    const incomplete = tableFromArrays({
      layer: ['s', 's', 's'], channel: Int32Array.from([0, 0, 1]), category: ['a', 'b', 'a'], sensitivity: Float64Array.from([1, 2, 3]),
      fd_error: Float64Array.from([0, 0, 0]), kind: ['gain', 'gain', 'gain'], step: Float64Array.from([0.01, 0.01, 0.01]), n: Int32Array.from([4, 4, 4]),
    });
    const gap = join(dir, 'incomplete.arrow');
    writeFileSync(gap, tableToIPC(incomplete, 'file'));
    expect(() => readSensitivityTable(gap)).toThrow(/layer "s" has 3 rows, expected channels × categories = 2 × 2/);
    const junk = join(dir, 'junk.arrow');
    writeFileSync(junk, 'not arrow at all');
    expect(() => readSensitivityTable(junk)).toThrow(/is not an Arrow IPC file/);
    // a column of the wrong type is named with both types
    const wrongType = tableFromArrays({ layer: Float64Array.from([1]), channel: Int32Array.from([0]), category: ['a'], sensitivity: Float64Array.from([1]) });
    const typed = join(dir, 'wrong-type.arrow');
    writeFileSync(typed, tableToIPC(wrongType, 'file'));
    expect(() => readSensitivityTable(typed)).toThrow(/column "layer" is Float64, expected Utf8/);
  });
});
