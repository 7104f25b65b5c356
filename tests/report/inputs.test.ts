import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { classifyReportInput, num, readReportInput } from '../../src/report/html/inputs.js';
import { tempFolder } from '../helpers/onnx-builder.js';
import { makeAgreement, makeComparison, makeDiff, makeSweep, makeTuneJson, viaJson } from './fixtures.js';

describe('classifyReportInput', () => {
  it('classifyReportInput(value, name) tells diff, comparison, sweep, agreement and tuning apart by their fields', () => {
    expect(classifyReportInput(viaJson(makeDiff()), 'd.json').map((i) => i.kind)).toEqual(['diff']);
    // a comparison also has layers and verdict: it must not be taken for a diff
    expect(classifyReportInput(viaJson(makeComparison()), 'c.json').map((i) => i.kind)).toEqual(['comparison']);
    expect(classifyReportInput(viaJson(makeSweep()), 's.json').map((i) => i.kind)).toEqual(['sweep']);
    expect(classifyReportInput(viaJson(makeAgreement()), 'a.json').map((i) => i.kind)).toEqual(['agreement']);
    expect(classifyReportInput(viaJson(makeTuneJson()), 't.json').map((i) => i.kind)).toEqual(['tuning']);
  });

  it('classifyReportInput(tune --against JSON) yields the tuning summary and its agreement', () => {
    const inputs = classifyReportInput(viaJson(makeTuneJson(false, true)), 't.json');
    expect(inputs.map((i) => [i.kind, i.name])).toEqual([['tuning', 't.json'], ['agreement', 't.json (comparison)']]);
  });

  it('classifyReportInput(TuneResult-like object with summaries) reads the summaries', () => {
    const tune = makeTuneJson();
    const [input] = classifyReportInput({ blocks: [], summaries: tune['layers'], categories: ['ring'] }, 'lib');
    expect(input!.kind).toBe('tuning');
  });

  it('classifyReportInput(unknown object) refuses with one line naming the input and its fields', () => {
    const attempt = () => classifyReportInput({ rows: [], format: 2 }, 'manifest.json');
    expect(attempt).toThrow(UsageError);
    expect(attempt).toThrow(/^manifest\.json: is not a Sonde diff, sweep, agreement or tuning result \(top-level fields: "rows", "format"\)$/);
  });

  it('classifyReportInput(non-object) refuses lists, null and numbers', () => {
    expect(() => classifyReportInput([1, 2], 'x')).toThrow(/x: is not a Sonde result \(a JSON list/);
    expect(() => classifyReportInput(null, 'x')).toThrow(/a JSON null/);
    expect(() => classifyReportInput(3, 'x')).toThrow(/a JSON number/);
  });

  it('classifyReportInput(a known kind missing a needed field) names the field', () => {
    const sweep = viaJson(makeSweep()) as Record<string, unknown>;
    delete sweep['cells'];
    expect(() => classifyReportInput(sweep, 's.json')).toThrow(/s\.json: looks like a sweep but its "cells" is missing/);
    const diff = viaJson(makeDiff()) as { layers: Array<Record<string, unknown>> };
    delete diff.layers[3]!['relativeChange'];
    expect(() => classifyReportInput(diff, 'd.json')).toThrow(/d\.json: looks like a diff but layers\[3\] has no "relativeChange"/);
  });
});

describe('readReportInput', () => {
  const dir = tempFolder('sonde-report-inputs-');

  it('readReportInput(path) names inputs by their file name', () => {
    const path = join(dir, 'diff-a.json');
    writeFileSync(path, JSON.stringify(makeDiff()));
    expect(readReportInput(path).map((i) => i.name)).toEqual(['diff-a.json']);
  });

  it('readReportInput(path) refuses a missing file, a folder and text that is not JSON (UsageError, exit 2)', () => {
    expect(() => readReportInput(join(dir, 'nope.json'))).toThrow(/nope\.json does not exist/);
    mkdirSync(join(dir, 'folder'), { recursive: true });
    expect(() => readReportInput(join(dir, 'folder'))).toThrow(/folder is a folder, not a JSON result/);
    writeFileSync(join(dir, 'table.txt'), 'depth  layer  rel. change\n');
    let error: unknown;
    try {
      readReportInput(join(dir, 'table.txt'));
    } catch (e) {
      error = e;
    }
    expect(error).toBeInstanceOf(UsageError);
    expect((error as UsageError).exitCode).toBe(2);
    expect((error as UsageError).message).toMatch(/table\.txt is not JSON/);
  });
});

describe('num', () => {
  it('num(value) passes numbers (NaN and ±Infinity included) and turns everything else into NaN', () => {
    expect(num(1.5)).toBe(1.5);
    expect(num(Number.POSITIVE_INFINITY)).toBe(Number.POSITIVE_INFINITY);
    expect(num(null)).toBeNaN();
    expect(num('3')).toBeNaN();
    expect(num(undefined)).toBeNaN();
  });
});
