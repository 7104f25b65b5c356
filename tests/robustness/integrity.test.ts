/**
 * Integrity of what Sonde reads: `record --resume` refuses stimuli whose bytes changed and partial
 * files that changed since their checkpoint; symbolic links that lead a snapshot's files, its layers
 * folder, its manifest or a model's external weights out of their folder are refused (and `check`
 * names them); FIFOs given as model, stimuli or layer file are refused without being opened; a layer
 * file whose size or bytes differ from the manifest stops `diff` and `tune` before any result.
 *
 * The expectations are exact properties: any changed byte changes a SHA-256 (FIPS 180-4: a collision
 * is not expected), a truncated file has another size, and the real path of a link's target outside a
 * folder does not lie inside it. FIFOs: opening one for reading blocks until a writer opens it (POSIX
 * open(2), O_RDONLY without O_NONBLOCK); every FIFO test asserts `statSync(...).isFIFO()` first and
 * runs with a guard process that opens the FIFO after some seconds, so even a regression that opens it
 * ends in a failed assertion, not in a hung suite.
 */
import { execFileSync, spawn, type ChildProcess } from 'node:child_process';
import { createHash } from 'node:crypto';
import { cpSync, existsSync, mkdirSync, readFileSync, readdirSync, renameSync, rmSync, statSync, symlinkSync, truncateSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { loadModel } from '../../src/graph/load-model.js';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot, type RecordOptions } from '../../src/record/record-snapshot.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { checkSnapshot } from '../../src/snapshot/check.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { buildTinyNet, externalise, runSonde, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

let dir: string;
let model: string;
let stimuli: { npy: string; labels: string };
let base: string;
let mod: string;
const guards: ChildProcess[] = [];

interface Manifest {
  layers: Array<{ name: string; file: string; bytes: number; from?: string; means?: { file: string; bytes: number } }>;
}

const manifestOf = (folder: string) => JSON.parse(readFileSync(join(folder, 'manifest.json'), 'utf8')) as Manifest;

function copy(name: string, from = base): string {
  const target = join(dir, name);
  cpSync(from, target, { recursive: true });
  return target;
}

/** The largest layer file of a snapshot that is its own (not the baseline's). */
function largestOwnLayer(folder: string): { name: string; file: string; path: string; bytes: number; means: { file: string; path: string; bytes: number } } {
  const own = manifestOf(folder).layers.filter((l) => l.from !== 'baseline');
  const layer = own.reduce((a, b) => (b.bytes > a.bytes ? b : a));
  // snapshot format 3: channel means (what tune reads) live in the layer's means file
  return { ...layer, path: join(folder, layer.file), means: { ...layer.means!, path: join(folder, layer.means!.file) } };
}

function flipByte(path: string, at: number): void {
  const bytes = readFileSync(path);
  bytes[at] = bytes[at]! ^ 0x01;
  writeFileSync(path, bytes);
}

/** Makes a FIFO and a guard that opens it read-write after 20 s (unblocking any reader stuck in open). */
function fifo(path: string): string {
  execFileSync('mkfifo', [path]);
  expect(statSync(path).isFIFO()).toBe(true);
  const guard = spawn('sh', ['-c', 'sleep 20; : <> "$0"', path], { stdio: 'ignore' });
  guard.unref();
  guards.push(guard);
  return path;
}

const recordArgs = (out: string, npy = stimuli.npy): RecordOptions => ({ model, stimuli: npy, labels: stimuli.labels, out, layers: 'all', batch: 4, threads: 1, checkpointSeconds: 0 });

/** A recording of 12 stimuli stopped after its second batch (8 stimuli checkpointed), copied to `name`. */
let interruptedTemplate: string;
async function interrupted(name: string): Promise<string> {
  if (!interruptedTemplate) {
    interruptedTemplate = join(dir, 'interrupted');
    await expect(
      recordSnapshot({
        ...recordArgs(interruptedTemplate),
        onProgress: (p) => {
          if (p.done >= 8) throw new Error('stopped by the test after 8 stimuli');
        },
      }),
    ).rejects.toThrow(/stopped by the test/);
    expect(JSON.parse(readFileSync(join(interruptedTemplate, 'progress.json'), 'utf8')).stimuli).toBe(8);
  }
  return copy(name, interruptedTemplate);
}

beforeAll(async () => {
  dir = tempFolder('sonde-integrity-');
  model = join(dir, 'net.onnx');
  writeFileSync(model, buildTinyNet({ bias: true, classes: 2 }));
  stimuli = writeStimuliNpy(dir, [12, 3, 16, 16], 7);
  base = (await recordSnapshot({ ...recordArgs(join(dir, 'base')), checkpointSeconds: 2 })).folder;
  writeFileSync(join(dir, 'spec.yaml'), 'site: relu1\nkind: uniform\ngain: 1.4\n');
  mod = (await recordModulated({ model, stimuli: stimuli.npy, labels: stimuli.labels, out: join(dir, 'mod'), modulate: join(dir, 'spec.yaml'), from: base })).folder;
});

afterAll(() => {
  for (const guard of guards) guard.kill('SIGKILL');
});

describe('record --resume checks contents', () => {
  it('record --resume refuses stimuli whose bytes changed since the interrupted run (same ids and labels), and resumes with the original ones', async () => {
    const out = await interrupted('resume-stimuli');
    // same shape, ids and labels; one value of stimulus 2 (inside the 8 already recorded) changed
    const changed = join(dir, 'changed.npy');
    const bytes = readFileSync(stimuli.npy);
    const header = 10 + bytes.readUInt16LE(8);
    const per = 3 * 16 * 16;
    bytes.writeFloatLE(bytes.readFloatLE(header + (2 * per + 5) * 4) + 0.25, header + (2 * per + 5) * 4);
    writeFileSync(changed, bytes);
    await expect(recordSnapshot({ ...recordArgs(out, changed), resume: true })).rejects.toThrow(/--resume: stimulus "2" \(index 2\) is not what the interrupted run recorded in .*: its input bytes changed/);
    expect(existsSync(join(out, 'progress.json'))).toBe(true); // refused, nothing replaced
    const resumed = await recordSnapshot({ ...recordArgs(out), resume: true });
    expect(resumed.resumed).toBe(8);
    for (const layer of manifestOf(base).layers) expect(readFileSync(join(out, layer.file)).equals(readFileSync(join(base, layer.file))), layer.file).toBe(true);
  });

  it('record --resume refuses a .partial layer file or digest log changed since its checkpoint (a flipped byte before the checkpoint)', async () => {
    const out = await interrupted('resume-partial');
    const progress = JSON.parse(readFileSync(join(out, 'progress.json'), 'utf8')) as { files: Record<string, number> };
    const [file, length] = Object.entries(progress.files)[0]!;
    flipByte(join(out, `${file}.partial`), length - 8); // inside the last checkpointed batch's body
    await expect(recordSnapshot({ ...recordArgs(out), resume: true })).rejects.toThrow(/cannot resume .*\.arrow\.partial: its first \d+ bytes changed since the checkpoint \(SHA-256 differs from progress\.json\)/);

    const log = await interrupted('resume-digests');
    flipByte(join(log, 'stimuli.digests.partial'), 40);
    const cli = await runSonde(['record', model, '--stimuli', stimuli.npy, '--labels', stimuli.labels, '--out', log, '--layers', 'all', '--batch', '4', '--threads', '1', '--resume']);
    expect(cli.code).toBe(1);
    expect(cli.stderr).toMatch(/cannot resume: .*stimuli\.digests\.partial changed since the checkpoint/);
  });
});

describe('symbolic links out of their folder', () => {
  it('a layer file that is a link to a file outside the snapshot is refused by readers and named by check', async () => {
    const folder = copy('link-file');
    const layer = largestOwnLayer(folder);
    const outside = join(dir, 'outside-layer.arrow');
    renameSync(layer.path, outside);
    symlinkSync(outside, layer.path);
    const outsideMeans = join(dir, 'outside-means.arrow');
    renameSync(layer.means.path, outsideMeans);
    symlinkSync(outsideMeans, layer.means.path);
    await expect(tuneSnapshot({ snapshot: folder })).rejects.toThrow(/layer file .* resolves to .*outside-means\.arrow, outside .* \(a symbolic link points out of the folder\)/);
    await expect(diffSnapshots({ base: folder, mod, bootstrap: 0 })).rejects.toThrow(/layer file .* resolves to .*outside-(layer|means)\.arrow, outside .* \(a symbolic link points out of the folder\)/);
    const report = await checkSnapshot(folder);
    expect(report.ok).toBe(false);
    expect(report.problems).toContainEqual({ subject: layer.file, message: expect.stringMatching(/^resolves to .*outside-layer\.arrow, outside .*layer "/) });
  });

  it('a layers folder that is a link to a folder outside the snapshot is refused by readers and named by check', async () => {
    const folder = copy('link-dir');
    const elsewhere = join(dir, 'elsewhere-layers');
    renameSync(join(folder, 'layers'), elsewhere);
    symlinkSync(elsewhere, join(folder, 'layers'));
    await expect(tuneSnapshot({ snapshot: folder })).rejects.toThrow(/resolves to .*elsewhere-layers.*, outside/);
    const report = await checkSnapshot(folder);
    expect(report.problems).toContainEqual({ subject: 'layers', message: expect.stringMatching(/^resolves to .*elsewhere-layers, outside/) });
  });

  it('a manifest.json that is a link to a file outside the snapshot is refused by readers and named by check', async () => {
    const folder = copy('link-manifest');
    const outside = join(dir, 'outside-manifest.json');
    renameSync(join(folder, 'manifest.json'), outside);
    symlinkSync(outside, join(folder, 'manifest.json'));
    expect(() => openSnapshot(folder)).toThrow(/manifest\.json resolves to .*outside-manifest\.json, outside/);
    const cli = await runSonde(['diff', folder, mod]);
    expect(cli.code).toBe(2);
    expect(cli.stdout).toBe('');
    const report = await checkSnapshot(folder);
    expect(report.problems).toEqual([{ subject: 'manifest.json', message: expect.stringMatching(/^resolves to .*outside-manifest\.json/) }]);
  });

  it('loadModel refuses external weights whose file is a link out of the model folder, and loads them from a real file', () => {
    const folder = join(dir, 'model-ext');
    mkdirSync(folder);
    const bytes = externalise(buildTinyNet({ bias: true }), folder);
    writeFileSync(join(folder, 'net.onnx'), bytes);
    expect(loadModel(join(folder, 'net.onnx')).parameterCount).toBeGreaterThan(0);
    const outside = join(dir, 'outside-weights.bin');
    renameSync(join(folder, 'weights.bin'), outside);
    symlinkSync(outside, join(folder, 'weights.bin'));
    expect(() => loadModel(join(folder, 'net.onnx'))).toThrow(/external data file "weights\.bin" of ".*" resolves to .*outside-weights\.bin, outside/);
    // a folder of links into a model store: the weights resolve beside the model's real file, so they load
    const store = join(dir, 'store');
    const links = join(dir, 'links');
    mkdirSync(store);
    mkdirSync(links);
    writeFileSync(join(store, 'net.onnx'), externalise(buildTinyNet({ bias: true }), store));
    symlinkSync(join(store, 'net.onnx'), join(links, 'net.onnx'));
    symlinkSync(join(store, 'weights.bin'), join(links, 'weights.bin'));
    expect(loadModel(join(links, 'net.onnx')).parameterCount).toBe(loadModel(join(store, 'net.onnx')).parameterCount);
  });

  it("a model's SHA-256 covers its external weight files: new weights under the same .onnx bytes change it", () => {
    // exact property of SHA-256 over the concatenated bytes; the pairing key of snapshots and sweep cells
    const folder = join(dir, 'model-ext-digest');
    mkdirSync(folder);
    const bytes = externalise(buildTinyNet({ bias: true }), folder);
    writeFileSync(join(folder, 'net.onnx'), bytes);
    const before = loadModel(join(folder, 'net.onnx')).sha256;
    const weights = readFileSync(join(folder, 'weights.bin'));
    weights[0] = weights[0]! ^ 0x01;
    writeFileSync(join(folder, 'weights.bin'), weights);
    const after = loadModel(join(folder, 'net.onnx'));
    expect(readFileSync(join(folder, 'net.onnx')).equals(Buffer.from(bytes))).toBe(true);
    expect(after.sha256).not.toBe(before);
    // a model without external data keeps the plain file hash
    const inline = join(folder, 'inline.onnx');
    writeFileSync(inline, buildTinyNet({ bias: true }));
    expect(loadModel(inline).sha256).toBe(createHash('sha256').update(readFileSync(inline)).digest('hex'));
  });
});

describe('FIFOs and devices are refused, never opened', () => {
  it('a FIFO (or device) as model, as .npy stimuli and as a layer file is refused with what it is; check names it', async () => {
    const modelFifo = fifo(join(dir, 'pipe.onnx'));
    expect(() => loadModel(modelFifo)).toThrow(/model .*pipe\.onnx is a FIFO \(named pipe\), not a regular file/);
    expect(() => loadModel('/dev/zero')).toThrow(/model \/dev\/zero is a character device, not a regular file/); // reading it would never end
    const stimuliFifo = fifo(join(dir, 'pipe.npy'));
    await expect(recordSnapshot({ ...recordArgs(join(dir, 'from-fifo'), stimuliFifo) })).rejects.toThrow(/--stimuli .*pipe\.npy is a FIFO \(named pipe\), not a regular file/);
    const folder = copy('fifo-layer');
    const layer = largestOwnLayer(folder);
    rmSync(layer.path);
    fifo(layer.path);
    rmSync(layer.means.path);
    fifo(layer.means.path);
    await expect(tuneSnapshot({ snapshot: folder })).rejects.toThrow(/layer file .*\.means\.arrow of .* is a FIFO \(named pipe\), not a regular file/);
    const report = await checkSnapshot(folder);
    expect(report.problems).toContainEqual({ subject: layer.file, message: expect.stringMatching(/^is a FIFO \(named pipe\), not a regular file/) });
  }, 30_000);
});

describe('layer files are checked against the manifest before their numbers are used', () => {
  it('a truncated layer file stops tune and diff with the file, its size and the fix', async () => {
    const folder = copy('truncated');
    const layer = largestOwnLayer(folder);
    truncateSync(layer.path, layer.bytes - 100);
    truncateSync(layer.means.path, layer.means.bytes - 100);
    const tune = await runSonde(['tune', folder, '--out', join(dir, 'truncated-tuning.arrow')]);
    expect(tune.code).toBe(1);
    expect(tune.stderr).toContain(`layer file ${layer.means.path} of "${layer.name}" is ${layer.means.bytes - 100} bytes, the manifest says ${layer.means.bytes} (truncated or changed after recording)`);
    expect(tune.stderr).toMatch(/sonde check .*truncated/);
    expect(existsSync(join(dir, 'truncated-tuning.arrow'))).toBe(false);
    await expect(diffSnapshots({ base: folder, mod, bootstrap: 0 })).rejects.toThrow(/is \d+ bytes, the manifest says \d+ \(truncated/);
  });

  it('a flipped byte (same size) in a layer file stops diff and tune before any result; size-only reading, the opt-in, does not notice it', async () => {
    const modFlip = copy('mod-flip', mod);
    const layer = largestOwnLayer(modFlip);
    flipByte(layer.path, Math.floor(layer.bytes / 2));
    expect(statSync(layer.path).size).toBe(layer.bytes);
    const diff = await runSonde(['diff', base, modFlip, '--bootstrap', '0']);
    expect(diff.code).toBe(1);
    expect(diff.stdout).toBe('');
    expect(diff.stderr).toContain(`layer file ${layer.path} of "${layer.name}" does not match the SHA-256 in the manifest (it changed or was damaged after recording)`);
    expect(diff.stderr).toMatch(/sonde check .*mod-flip/);
    const intact = await runSonde(['diff', base, mod, '--bootstrap', '0', '--json']);
    expect(intact.code, intact.stderr).toBe(0);
    const sizeOnlyDiff = await runSonde(['diff', base, modFlip, '--bootstrap', '0', '--json', '--skip-sha256']);
    expect(sizeOnlyDiff.code, sizeOnlyDiff.stderr).toBe(0); // what the opt-in gives up: same-size changes

    const baseFlip = copy('base-flip');
    const own = largestOwnLayer(baseFlip);
    flipByte(own.means.path, Math.floor(own.means.bytes / 2)); // tune reads the means file
    await expect(tuneSnapshot({ snapshot: baseFlip })).rejects.toThrow(/does not match the SHA-256 in the manifest/);
    await expect(tuneSnapshot({ snapshot: openSnapshot(baseFlip, { verify: 'size-only' }) })).resolves.toBeDefined();
    expect(readdirSync(dir)).not.toContain('base-flip-tuning.arrow');
  });
});
