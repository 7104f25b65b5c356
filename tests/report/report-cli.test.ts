import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { reportToJson } from '../../src/report/diff-table.js';
import { runSonde, tempFolder } from '../helpers/onnx-builder.js';
import { makeDiff, makeSweep, makeTuneJson } from './fixtures.js';

let dir: string;

beforeAll(() => {
  dir = tempFolder('sonde-report-cli-');
  writeFileSync(join(dir, 'diff.json'), reportToJson(makeDiff()));
  writeFileSync(join(dir, 'sweep.json'), JSON.stringify(makeSweep({ strengths: [0, 0.5, 1] })));
  writeFileSync(join(dir, 'tune.json'), JSON.stringify(makeTuneJson(false, true)));
  writeFileSync(join(dir, 'manifest.json'), JSON.stringify({ format: 2, layers: [], complete: true }));
  writeFileSync(join(dir, 'table.txt'), 'depth layer\n0 conv1\n');
});

/** A failure: exit code, one line on stderr, no stack, no output file. */
async function expectFailure(args: string[], code: 1 | 2, pattern: RegExp, out?: string) {
  const result = await runSonde(args);
  expect(result.code, result.stderr).toBe(code);
  expect(result.stderr.trim().split('\n')).toHaveLength(1);
  expect(result.stderr).toMatch(pattern);
  expect(result.stderr).not.toMatch(/\n\s+at /);
  if (out) expect(existsSync(out)).toBe(false);
}

describe('sonde report', () => {
  it('sonde report DIFF SWEEP TUNE --out FILE writes one page and says what it holds', async () => {
    const out = join(dir, 'report.html');
    const result = await runSonde(['report', join(dir, 'diff.json'), join(dir, 'sweep.json'), join(dir, 'tune.json'), '--out', out, '--title', 'Glyph search']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stdout).toMatch(/^wrote .*report\.html \(\d+ KiB\): 6 charts, 7 sections, from 4 inputs \(diff, sweep, tuning, agreement\)\n$/);
    const page = readFileSync(out, 'utf8');
    expect(page).toContain('<title>Glyph search</title>');
    expect(page.match(/<svg /g)).toHaveLength(6);
  });

  it('sonde report with an unknown JSON kind exits 2 with one line naming the file', async () => {
    const out = join(dir, 'r-unknown.html');
    await expectFailure(['report', join(dir, 'diff.json'), join(dir, 'manifest.json'), '--out', out], 2, /^sonde: manifest\.json: is not a Sonde diff, sweep, agreement or tuning result \(top-level fields: "format", "layers", "complete"\)/, out);
  });

  it('sonde report with a text table instead of JSON exits 2 naming the file', async () => {
    await expectFailure(['report', join(dir, 'table.txt'), '--out', join(dir, 'r-text.html')], 2, /table\.txt is not JSON/, join(dir, 'r-text.html'));
  });

  it('sonde report with a missing input exits 2 naming it', async () => {
    await expectFailure(['report', join(dir, 'missing.json'), '--out', join(dir, 'r-missing.html')], 2, /missing\.json does not exist/);
  });

  it('sonde report without --out exits 2 (commander names the option)', async () => {
    await expectFailure(['report', join(dir, 'diff.json')], 2, /--out/);
  });

  it('sonde report --out into a folder that does not exist exits 1 naming the file', async () => {
    await expectFailure(['report', join(dir, 'diff.json'), '--out', join(dir, 'no', 'such', 'r.html')], 1, /cannot write .*r\.html \(ENOENT\)/);
  });
});
