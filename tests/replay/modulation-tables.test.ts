import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadModulationTables } from '../../src/replay/modulation-tables.js';
import { writeSensitivityTable, writeTuningTable } from '../../src/snapshot/tables.js';
import { tempFolder } from '../helpers/onnx-builder.js';

describe('loadModulationTables', () => {
  it('loadModulationTables refuses a 4-category tuning table with a 1000-unit sensitivity table in one short line naming the first difference and the fix', () => {
    const dir = tempFolder();
    const C = 2;
    const tuningCats = ['ring', 'bar', 'dot', 'cross'];
    const unitCats = Array.from({ length: 1000 }, (_, i) => String(i));
    const tuning = join(dir, 't.arrow');
    const K = tuningCats.length;
    writeTuningTable(tuning, [{ layer: 'relu0', channels: C, categories: tuningCats, mean: new Float64Array(C * K), sem: new Float64Array(C * K), count: new Int32Array(K).fill(3), tuning: new Float64Array(C * K), preferred: new Int32Array(C).fill(-1), selectivity: new Float64Array(C), zeroVariance: new Uint8Array(C) }]);
    const sensitivity = join(dir, 's.arrow');
    writeSensitivityTable(sensitivity, [{ layer: 'relu0', channels: C, categories: unitCats, sensitivity: new Float64Array(C * 1000), fdError: new Float64Array(C * 1000), kind: 'gain', step: 0.002, count: new Int32Array(1000).fill(1) }]);
    let message = '';
    try {
      loadModulationTables({ tuning, sensitivity });
    } catch (error) {
      message = `${(error as Error).message} ${(error as { hint?: string }).hint ?? ''}`;
    }
    expect(message).toMatch(/"ring" is in --tuning .* but not in --sensitivity/);
    expect(message).toMatch(/1000 in all/);
    expect(message).toMatch(/sonde heads/);
    expect(message.includes('\n')).toBe(false);
    expect(message.length).toBeLessThan(600);
  });
});
