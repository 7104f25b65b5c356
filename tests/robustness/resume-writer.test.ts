import { createHash } from 'node:crypto';
import { copyFileSync, readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { tableFromIPC } from 'apache-arrow';
import { describe, expect, it } from 'vitest';
import { LayerFileWriter } from '../../src/snapshot/layer-file.js';
import { scanRecordBatches } from '../../src/snapshot/resume.js';
import { createRandom } from '../../src/random.js';
import { tempFolder } from '../helpers/onnx-builder.js';

const layout = { name: 'conv', shape: [3, 2, 2], dtype: 'float32' as const, keep: 'full' as const };

function batchValues(k: number, rows: number): Float32Array {
  const rng = createRandom(`batch-${k}`);
  return new Float32Array(rows * 12).map(() => rng.normal());
}

/** Writes batches of 5, 5, 5, 2 rows; returns the final file's bytes. */
function writeAll(path: string, from = 0, writer = new LayerFileWriter(path, layout)): { sha256: string; bytes: number; rows: number } {
  const sizes = [5, 5, 5, 2];
  let first = sizes.slice(0, from).reduce((a, b) => a + b, 0);
  for (let k = from; k < sizes.length; k++) {
    writer.write(first, sizes[k]!, batchValues(k, sizes[k]!));
    first += sizes[k]!;
  }
  return writer.finish();
}

describe('LayerFileWriter resume', () => {
  it('LayerFileWriter({resumeAt}) continues a killed file and finishes byte-identical to an uninterrupted write', () => {
    const dir = tempFolder();
    const clean = writeAll(join(dir, 'clean.arrow'));
    // interrupted: two batches, checkpoint, a third batch written past the checkpoint, then "killed"
    const path = join(dir, 'cut.arrow');
    const writer = new LayerFileWriter(path, layout);
    writer.write(0, 5, batchValues(0, 5));
    writer.write(5, 5, batchValues(1, 5));
    const checkpoint = writer.checkpoint();
    writer.write(10, 5, batchValues(2, 5));
    expect(statSync(`${path}.partial`).size).toBeGreaterThan(checkpoint);
    const scanned = scanRecordBatches(`${path}.partial`, checkpoint);
    expect(scanned.rows).toEqual([5, 5]);
    const resumed = new LayerFileWriter(path, layout, { resumeAt: checkpoint });
    expect(resumed.rows).toBe(10);
    const result = writeAll(path, 2, resumed);
    // exact property: same bytes → same SHA-256 (independently recomputed from the file)
    expect(readFileSync(path).equals(readFileSync(join(dir, 'clean.arrow')))).toBe(true);
    expect(result).toEqual(clean);
    expect(createHash('sha256').update(readFileSync(path)).digest('hex')).toBe(clean.sha256);
    expect(tableFromIPC(readFileSync(path)).numRows).toBe(17);
  });

  it('scanRecordBatches refuses a checkpoint that cuts a message', () => {
    const dir = tempFolder();
    const path = join(dir, 'x.arrow');
    const writer = new LayerFileWriter(path, layout);
    writer.write(0, 5, batchValues(0, 5));
    const at = writer.checkpoint();
    copyFileSync(`${path}.partial`, join(dir, 'copy.partial'));
    expect(() => scanRecordBatches(join(dir, 'copy.partial'), at - 3)).toThrow(/cannot resume .*(cut off|ends at byte)/);
    expect(() => scanRecordBatches(join(dir, 'copy.partial'), 4)).toThrow(/magic/);
  });
});
