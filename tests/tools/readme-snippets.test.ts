/**
 * The README's "Reading snapshots elsewhere" snippets, run as written against a modulated snapshot
 * whose layer `relu1` lives in its baseline (`from: "baseline"`, the case the old snippet failed on):
 * each must produce the values Sonde's own reader (openSnapshot) hands out. The Python snippets run with
 * Debian's /usr/bin/python3 (python3-numpy, python3-xarray, installed by .ci/run); the pyarrow snippet
 * only where a Python with pyarrow is found (SONDE_PYARROW_PYTHON, or /usr/bin/python3 if it has it);
 * the Polars snippet with nodejs-polars (a devDependency). The R snippet is not run (no R here).
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import * as fs from 'node:fs';
import * as path from 'node:path';
import { join } from 'node:path';
import pl from 'nodejs-polars';
import { beforeAll, describe, expect, it } from 'vitest';
import { exportSnapshot } from '../../src/export/export-snapshot.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

const ROOT = join(import.meta.dirname, '..', '..');
const PYTHON = '/usr/bin/python3';
const has = (python: string, modules: string) => spawnSync(python, ['-c', `import ${modules}`]).status === 0;
const hasNumpy = has(PYTHON, 'numpy');
const hasXarray = hasNumpy && has(PYTHON, 'xarray');
const pyarrowPython = [process.env['SONDE_PYARROW_PYTHON'], PYTHON].find((p) => p !== undefined && p !== '' && has(p, 'numpy, pyarrow'));

/** The fenced blocks of one language in the README section "Reading snapshots elsewhere", in order. */
function snippets(language: string): string[] {
  const readme = readFileSync(join(ROOT, 'README.md'), 'utf8');
  const start = readme.indexOf('### Reading snapshots elsewhere');
  const end = readme.indexOf('\n## ', start);
  expect(start).toBeGreaterThan(0);
  const section = readme.slice(start, end);
  return [...section.matchAll(new RegExp('```' + language + '\\n([\\s\\S]*?)```', 'g'))].map((m) => m[1]!);
}

let dir: string;
let expectedActs: Float32Array;
let expectedMeans: Float32Array;

beforeAll(async () => {
  dir = tempFolder('sonde-readme-');
  const model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, seed: 4 }));
  const stim = writeStimuliNpy(dir, [7, 3, 16, 16], 5);
  const snaps = join(dir, 'snapshots');
  mkdirSync(snaps);
  await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(snaps, 'base'), layers: 'all', batch: 3, threads: 1 });
  writeFileSync(join(dir, 'attend.json'), JSON.stringify({ site: 'relu2', kind: 'uniform', gain: 1.4 }));
  await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: join(snaps, 'attend'), modulate: join(dir, 'attend.json'), from: join(snaps, 'base'), batch: 3, threads: 1 });
  await exportSnapshot({ snapshot: join(snaps, 'attend'), out: join(snaps, 'attend-npy') });
  const snap = openSnapshot(join(snaps, 'attend'));
  expect(snap.layer('relu1').from).toBe('baseline');
  const values: number[] = [];
  for await (const batch of snap.readLayer('relu1')) values.push(...batch.activation!);
  expectedActs = Float32Array.from(values);
  expectedMeans = await snap.readChannelMeans('relu1');
}, 60_000);

/** Runs a Python snippet in the temporary folder and returns the acts and means it computed. */
function runPython(python: string, code: string): { acts: Float32Array; means: Float32Array } {
  const script = `${code}\nimport sys\nnp.save(sys.argv[1], np.asarray(acts, dtype=np.float32)); np.save(sys.argv[2], np.asarray(means, dtype=np.float32))\n`;
  writeFileSync(join(dir, 'snippet.py'), script);
  const result = spawnSync(python, ['snippet.py', 'acts.npy', 'means.npy'], { cwd: dir, encoding: 'utf8', env: { ...process.env, PYTHONPATH: join(ROOT, 'tools', 'python') } });
  expect(result.status, result.stderr).toBe(0);
  return { acts: parseNpy(readFileSync(join(dir, 'acts.npy'))).data as Float32Array, means: parseNpy(readFileSync(join(dir, 'means.npy'))).data as Float32Array };
}

function expectSame(got: { acts: Float32Array; means: Float32Array }): void {
  expect(Buffer.compare(Buffer.from(got.acts.buffer), Buffer.from(expectedActs.buffer))).toBe(0);
  expect(Buffer.compare(Buffer.from(got.means.buffer), Buffer.from(expectedMeans.buffer))).toBe(0);
}

describe('README snippets for reading snapshots elsewhere', () => {
  it('README holds the export, reader and pyarrow Python snippets, the Polars snippet and the R snippet', () => {
    expect(snippets('python')).toHaveLength(3);
    expect(snippets('js')).toHaveLength(1);
    expect(snippets('r')).toHaveLength(1);
  });

  it.skipIf(!hasXarray)('README export snippet (NumPy memory map + xarray) gives relu1 as Sonde reads it, with the export\'s dims', () => {
    const code = `${snippets('python')[0]!}\nassert list(da.dims) == ['stimulus', 'channel', 'y', 'x'] and list(da['id'].values) == st['id'], da\n`;
    expectSame(runPython(PYTHON, code));
  });

  it.skipIf(!hasXarray)('README sonde_read snippet gives relu1 as Sonde reads it', () => {
    expectSame(runPython(PYTHON, `import numpy as np\n${snippets('python')[1]!}\nassert da.shape == acts.shape\n`));
  });

  it.skipIf(pyarrowPython === undefined)('README pyarrow snippet resolves the baseline and gives relu1 as Sonde reads it', () => {
    expectSame(runPython(pyarrowPython!, snippets('python')[2]!));
  });

  it('README Polars snippet reads relu1 from the baseline folder with the rows Sonde reads', () => {
    const previous = process.cwd();
    process.chdir(dir);
    try {
      const frame = new Function('pl', 'fs', 'path', `${snippets('js')[0]!}\nreturn frame;`)(pl, fs, path) as pl.DataFrame;
      expect(frame.height).toBe(7);
      expect([...frame.getColumn('index').toArray()]).toEqual([0, 1, 2, 3, 4, 5, 6]);
      const first = frame.getColumn('channel_mean').toArray()[0] as unknown as { toArray?: () => number[] } | number[];
      const row = Array.isArray(first) ? first : [...(first as { toArray: () => number[] }).toArray()];
      expect(Float32Array.from(row)).toEqual(expectedMeans.subarray(0, row.length));
    } finally {
      process.chdir(previous);
    }
  });
});
