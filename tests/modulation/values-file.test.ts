import { execFileSync } from 'node:child_process';
import { existsSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { parseValuesCsv, readValuesFile, vectorFromNpy } from '../../src/modulation/values-file.js';
import { formatNpy } from '../../src/stimuli/npy.js';

const folder = mkdtempSync(join(tmpdir(), 'sonde-values-'));
afterAll(() => rmSync(folder, { recursive: true, force: true }));

/** Debian's python3 with NumPy, an independent writer of .npy files; the check is skipped without it. */
const PYTHON = '/usr/bin/python3';
const hasNumpy = (() => {
  if (!existsSync(PYTHON)) return false;
  try {
    execFileSync(PYTHON, ['-c', 'import numpy'], { stdio: 'ignore' });
    return true;
  } catch {
    return false;
  }
})();

describe('parseValuesCsv', () => {
  it('parseValuesCsv(text) reads one number per line with an optional header, comments and CRLF', () => {
    expect(parseValuesCsv('1\n0.5\n-2e-1\n', 'g.csv')).toEqual([1, 0.5, -0.2]);
    expect(parseValuesCsv('\uFEFFgain\r\n1.5\r\n\r\n# a comment\r\n.25\r\n', 'g.csv')).toEqual([1.5, 0.25]);
    expect(parseValuesCsv('"value"\n"3"\n', 'g.csv')).toEqual([3]);
  });

  it('parseValuesCsv(text) reads the value column of a table and checks a channel column', () => {
    expect(parseValuesCsv('channel,label,value\n0,ring,1.25\n1,cross,0.75\n', 'g.csv')).toEqual([1.25, 0.75]);
    expect(parseValuesCsv('Value, note\n2, x\n3, y\n', 'g.csv')).toEqual([2, 3]);
    expect(() => parseValuesCsv('channel,value\n1,1.25\n0,0.75\n', 'g.csv')).toThrow(/g\.csv line 2: channel column reads "1", expected 0/);
  });

  it('parseValuesCsv(text) rejects NaN, Inf, overflow and text, naming the line', () => {
    expect(() => parseValuesCsv('1\nNaN\n', 'g.csv')).toThrow(/g\.csv line 2: "NaN" is not finite/);
    expect(() => parseValuesCsv('value\n1\n-inf\n', 'g.csv')).toThrow(/line 3: "-inf" is not finite/);
    expect(() => parseValuesCsv('1e400\n', 'g.csv')).toThrow(/line 1: 1e400 overflows/);
    expect(() => parseValuesCsv('1\nabc\n', 'g.csv')).toThrow(/line 2: "abc" is not a number/);
    expect(() => parseValuesCsv('channel,value\n0,\n', 'g.csv')).toThrow(/line 2: "" is not a number/);
  });

  it('parseValuesCsv(text) rejects a table without a value column, ragged rows and an empty file', () => {
    expect(() => parseValuesCsv('channel,gain\n0,1\n', 'g.csv')).toThrow(/needs a "value" column/);
    expect(() => parseValuesCsv('channel,value\n0,1,2\n', 'g.csv')).toThrow(/expected 2 cell\(s\), got 3/);
    expect(() => parseValuesCsv('value\n\n# nothing\n', 'g.csv')).toThrow(/holds no values/);
    expect(() => parseValuesCsv('', 'g.csv')).toThrow(UsageError);
  });
});

describe('vectorFromNpy', () => {
  it('vectorFromNpy(bytes) reads [C], [1, C] and integer arrays', () => {
    expect(vectorFromNpy(formatNpy(Float64Array.from([0.5, 1.5]), [2]), 'g.npy')).toEqual([0.5, 1.5]);
    expect(vectorFromNpy(formatNpy(Float32Array.from([0.25, 2]), [1, 2]), 'g.npy')).toEqual([0.25, 2]);
    expect(vectorFromNpy(formatNpy(Int32Array.from([3, -1]), [2, 1]), 'g.npy')).toEqual([3, -1]);
  });

  it('vectorFromNpy(bytes) rejects matrices, empty arrays and NaN/Inf elements', () => {
    expect(() => vectorFromNpy(formatNpy(new Float32Array(4), [2, 2]), 'g.npy')).toThrow(/expected a vector, got an array of shape \[2, 2\]/);
    expect(() => vectorFromNpy(formatNpy(new Float32Array(0), [0]), 'g.npy')).toThrow(/empty/);
    expect(() => vectorFromNpy(formatNpy(Float32Array.from([1, Number.POSITIVE_INFINITY]), [2]), 'g.npy')).toThrow(/element 1 is Infinity/);
  });

  it.skipIf(!hasNumpy)('readValuesFile(path) reads a vector that NumPy itself wrote with numpy.save', () => {
    // independent writer: NumPy (Debian python3-numpy); float32 values chosen exact in binary
    const path = join(folder, 'numpy.npy');
    execFileSync(PYTHON, ['-c', `import numpy as np; np.save(${JSON.stringify(path)}, np.array([0.5, -1.25, 3.0], dtype=np.float32))`]);
    expect(readValuesFile(path, 'numpy.npy')).toEqual([0.5, -1.25, 3]);
  });
});

describe('readValuesFile', () => {
  it('readValuesFile(path) picks the format by extension and rejects others', () => {
    const csv = join(folder, 'g.CSV');
    writeFileSync(csv, '1\n2\n');
    expect(readValuesFile(csv, 'spec.yaml: values')).toEqual([1, 2]);
    const txt = join(folder, 'g.txt');
    writeFileSync(txt, '1\n');
    expect(() => readValuesFile(txt, 'spec.yaml: values "g.txt"')).toThrow(/spec\.yaml: values "g\.txt": values files must end in \.npy or \.csv/);
  });

  it('readValuesFile(path) reports a missing file as a UsageError', () => {
    expect(() => readValuesFile(join(folder, 'absent.npy'), 'spec.yaml: values')).toThrow(UsageError);
    expect(() => readValuesFile(join(folder, 'absent.npy'), 'spec.yaml: values')).toThrow(/file not found/);
  });
});
