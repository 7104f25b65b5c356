/**
 * `checkSnapshot`: verifies a snapshot folder against its manifest and says exactly what is wrong —
 * manifest schema and format version, paths inside the folder (also after following symbolic links:
 * `manifest.json`, `layers/`, layer files and `stimuli.arrow` must resolve inside it, and be regular
 * files — a FIFO is named, never opened), each file's size and SHA-256, each layer
 * file's Arrow schema (index int32, channel_mean FixedSizeList<float32>[C], activation
 * FixedSizeList<float32|float16>[E] with the shape in its field metadata), row counts and the index
 * column (consecutive global indices from the snapshot's first stimulus), `stimuli.arrow` (rows, index,
 * listing digest, per-stimulus digests against the stimuli digest), and the pairing with a baseline
 * (present, unchanged since — its manifest hash —, same model and stimuli, same layers).
 *
 * Reading is streamed: one record batch at a time, files hashed in 4 MiB chunks. Nothing is written.
 */
import { createHash } from 'node:crypto';
import { closeSync, existsSync, openSync, readdirSync, readSync, statSync } from 'node:fs';
import { open } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import { DataType, RecordBatchReader, type Field, type Schema } from 'apache-arrow';
import { SondeError } from '../errors.js';
import { readLockOwner, isStale, LOCK_FILE } from '../disk/lock.js';
import { channelCount, SHAPE_METADATA_KEY, spatialSize } from './layer-file.js';
import { assertInside, baselineLayerProblems, layerLayout, validateManifest, type ManifestLayer, type SnapshotManifest } from './manifest.js';
import { verifyStimulusTable } from './stimuli-file.js';
import { registerArrowCodecs } from './compression.js';
import { layerCodecProblem, meansFileProblems } from './means-check.js';
import { LayerBlockFile } from './block-reader.js';
import { parseJson } from '../json.js';
import { describeNonRegular, INPUT_LIMITS, readInputFile, readInputText, realPathInside } from '../disk/input-file.js';

/** One thing that is wrong. */
export interface CheckProblem {
  /** What it concerns: `manifest.json`, a file path relative to the snapshot, or `baseline`. */
  subject: string;
  /** One line saying what is wrong. */
  message: string;
}

/** The result of `checkSnapshot`. */
export interface CheckReport {
  folder: string;
  /** True when there are no problems. */
  ok: boolean;
  /** What the manifest says (false also when it cannot be read). */
  complete: boolean;
  problems: CheckProblem[];
  /** Observations that are not errors (leftover temporary files, a shard's listing digest). */
  notes: string[];
  /** What was verified. */
  checked: { layerFiles: number; bytes: number; stimuli: number; baseline: boolean };
}

/**
 * Checks a snapshot folder (see the file comment).
 * @param folder the snapshot folder.
 * @returns every problem found, in the order checked; never throws for bad content.
 * Edge cases: an incomplete snapshot is one problem (its files are partial and not checked further); a
 * layer referenced from the baseline is checked in the baseline's folder.
 */
export async function checkSnapshot(folder: string): Promise<CheckReport> {
  const root = resolve(folder);
  const problems: CheckProblem[] = [];
  const notes: string[] = [];
  const checked = { layerFiles: 0, bytes: 0, stimuli: 0, baseline: false };
  const report = (complete: boolean): CheckReport => ({ folder: root, ok: problems.length === 0, complete, problems, notes, checked });
  const problem = (subject: string, message: string) => problems.push({ subject, message });

  const manifestPath = join(root, 'manifest.json');
  if (!existsSync(root) || !statSync(root).isDirectory()) {
    problem(folder, 'is not a folder');
    return report(false);
  }
  if (!existsSync(manifestPath)) {
    problem('manifest.json', 'is missing: this folder is not a snapshot');
    return report(false);
  }
  const manifestUnsafe = escapes(root, manifestPath) ?? notRegular(manifestPath);
  if (manifestUnsafe) {
    problem('manifest.json', manifestUnsafe);
    return report(false);
  }
  let manifest: SnapshotManifest;
  try {
    manifest = validateManifest(parseJson(readInputText(manifestPath, 'manifest.json', INPUT_LIMITS.json)), folder);
  } catch (error) {
    problem('manifest.json', error instanceof SyntaxError ? `is not valid JSON (${error.message})` : firstLine(error));
    return report(false);
  }
  noteLeftovers(root, notes);
  if (!manifest.complete) {
    problem('manifest.json', `says the snapshot is incomplete${manifest.error ? ` (${manifest.error})` : ' (the recording did not finish)'}${existsSync(join(root, 'progress.json')) ? '; `sonde record ... --resume` can continue it' : ''}`);
    return report(false);
  }
  const firstIndex = manifest.shard ? manifest.shard.stimuli[0] : 0;
  const count = manifest.stimuli.count;
  const layersFolder = join(root, 'layers');
  const layersUnsafe = existsSync(layersFolder) ? escapes(root, layersFolder) : null;
  if (layersUnsafe) problem('layers', layersUnsafe);
  let baselineRoot: string | null = null;
  if (manifest.baseline) {
    baselineRoot = resolve(root, manifest.baseline.path);
    checked.baseline = true;
    checkBaseline(manifest, baselineRoot, problem);
  }

  for (const entry of manifest.layers) {
    let path: string;
    let subject = entry.file;
    try {
      if (entry.from === 'baseline') {
        if (!baselineRoot) continue;
        path = assertInside(baselineRoot, entry.file, `baseline layer "${entry.name}" file`);
        subject = `baseline ${entry.file}`;
      } else path = assertInside(root, entry.file, `layer "${entry.name}" file`);
    } catch (error) {
      problem(entry.file, firstLine(error));
      continue;
    }
    if (!existsSync(path)) {
      problem(subject, `is missing (layer "${entry.name}")`);
      continue;
    }
    const unsafe = escapes(entry.from === 'baseline' ? baselineRoot! : root, path) ?? notRegular(path);
    if (unsafe) {
      // the link's target is not read: it is not part of the snapshot (and a FIFO would block)
      if (!layersUnsafe || !unsafe.startsWith('resolves')) problem(subject, `${unsafe} (layer "${entry.name}")`);
      continue;
    }
    checked.layerFiles++;
    const size = statSync(path).size;
    checked.bytes += size;
    if (entry.bytes === undefined || entry.sha256 === undefined || entry.rows === undefined) problem(subject, `layer "${entry.name}" has no recorded size, SHA-256 or row count in the manifest`);
    if (entry.bytes !== undefined && size !== entry.bytes) problem(subject, `is ${size} bytes, the manifest says ${entry.bytes} (truncated or changed after recording)`);
    else if (entry.sha256 !== undefined && hashFile(path) !== entry.sha256) problem(subject, 'SHA-256 differs from the manifest (the file changed after recording)');
    await checkLayerFile(path, subject, entry, firstIndex, count, problem);
    const codec = layerCodecProblem(path, entry);
    if (codec) problem(subject, codec);
    if (entry.means) checkMeansFile(entry, path, entry.from === 'baseline' ? baselineRoot! : root, layersUnsafe !== null, problem, checked);
  }
  checkStimuli(root, manifest, firstIndex, problem, notes);
  checked.stimuli = count;
  return report(true);
}

/**
 * A layer's channel-means file (format 3): inside the folder, a regular file, its size and SHA-256 as the
 * manifest says, and its content in agreement with the layer file (`meansFileProblems`).
 */
function checkMeansFile(entry: ManifestLayer, layerPath: string, folder: string, layersEscape: boolean, problem: (s: string, m: string) => void, checked: CheckReport['checked']): void {
  const means = entry.means!;
  const subject = `${entry.from === 'baseline' ? 'baseline ' : ''}${means.file}`;
  let path: string;
  try {
    path = assertInside(folder, means.file, `layer "${entry.name}" means file`);
  } catch (error) {
    problem(means.file, firstLine(error));
    return;
  }
  if (!existsSync(path)) {
    problem(subject, `is missing (channel means of layer "${entry.name}")`);
    return;
  }
  const unsafe = escapes(folder, path) ?? notRegular(path);
  if (unsafe) {
    if (!layersEscape || !unsafe.startsWith('resolves')) problem(subject, `${unsafe} (channel means of layer "${entry.name}")`);
    return;
  }
  const size = statSync(path).size;
  checked.bytes += size;
  if (size !== means.bytes) {
    problem(subject, `is ${size} bytes, the manifest says ${means.bytes} (truncated or changed after recording)`);
    return;
  }
  if (hashFile(path) !== means.sha256) {
    problem(subject, 'SHA-256 differs from the manifest (the file changed after recording)');
    return;
  }
  const channels = channelCount(entry.shape, layerLayout(entry));
  for (const line of meansFileProblems(layerPath, path, entry, channels)) problem(subject, line);
}

/** Why `path` may not be read as part of the folder `root`: a link that leads out of it, or null. */
function escapes(root: string, path: string): string | null {
  try {
    realPathInside(root, path, 'it');
    return null;
  } catch (error) {
    return error instanceof SondeError ? error.message.replace(/^it /, '') : firstLine(error);
  }
}

/** `is a FIFO (named pipe), not a regular file`, or null for a regular file. */
function notRegular(path: string): string | null {
  const kind = describeNonRegular(statSync(path));
  return kind ? `is ${kind}, not a regular file` : null;
}

function firstLine(error: unknown): string {
  const text = error instanceof SondeError || error instanceof Error ? error.message : String(error);
  return (text.split('\n')[0] ?? '').replace(/^.*?manifest\.json: /, '');
}

/** SHA-256 of a file, read in 4 MiB chunks. */
function hashFile(path: string): string {
  const hash = createHash('sha256');
  const fd = openSync(path, 'r');
  try {
    const chunk = new Uint8Array(1 << 22);
    for (;;) {
      const read = readSync(fd, chunk, 0, chunk.length, null);
      if (read <= 0) break;
      hash.update(chunk.subarray(0, read));
    }
  } finally {
    closeSync(fd);
  }
  return hash.digest('hex');
}

function noteLeftovers(root: string, notes: string[]): void {
  const leftovers: string[] = [];
  for (const name of readdirSync(root).sort()) {
    if (name === 'progress.json' || name === 'stimuli.digests.partial' || name === 'stimuli.arrow.partial' || /^(manifest\.json|progress\.json)\.\d+-[0-9a-f]{8}\.partial$/.test(name)) leftovers.push(name);
  }
  if (existsSync(join(root, 'layers'))) {
    for (const name of readdirSync(join(root, 'layers'))) if (name.endsWith('.partial')) leftovers.push(`layers/${name}`);
  }
  if (leftovers.length > 0) notes.push(`temporary files left by an interrupted write: ${leftovers.join(', ')}`);
  const owner = existsSync(join(root, LOCK_FILE)) ? readLockOwner(join(root, LOCK_FILE)) : null;
  if (owner) notes.push(isStale(owner) ? `stale lock of pid ${owner.pid} (no longer running)` : `locked by pid ${owner.pid} on ${owner.host} since ${owner.started}: it may be writing right now`);
}

function checkBaseline(manifest: SnapshotManifest, baselineRoot: string, problem: (s: string, m: string) => void): void {
  const path = join(baselineRoot, 'manifest.json');
  if (!existsSync(path)) {
    problem('baseline', `${manifest.baseline!.path} (${baselineRoot}) is missing or not a snapshot`);
    return;
  }
  let bytes: Buffer;
  try {
    bytes = readInputFile(path, `${manifest.baseline!.path}/manifest.json`, INPUT_LIMITS.json);
  } catch (error) {
    problem('baseline', firstLine(error));
    return;
  }
  if (createHash('sha256').update(bytes).digest('hex') !== manifest.baseline!.manifestSha256) {
    problem('baseline', `${manifest.baseline!.path}: its manifest changed since this snapshot was recorded (manifest SHA-256 differs); the pairing no longer holds`);
  }
  let base: SnapshotManifest;
  try {
    base = validateManifest(parseJson(bytes.toString('utf8')), baselineRoot);
  } catch (error) {
    problem('baseline', firstLine(error));
    return;
  }
  if (!base.complete) problem('baseline', `${manifest.baseline!.path} is incomplete`);
  if (base.model.sha256 !== manifest.model.sha256) problem('baseline', `${manifest.baseline!.path} was recorded from another model`);
  if (base.stimuli.digest !== manifest.stimuli.digest) problem('baseline', `${manifest.baseline!.path} was recorded on other stimuli (stimuli digests differ)`);
  if (base.layers.map((l) => l.name).join('\n') !== manifest.layers.map((l) => l.name).join('\n')) problem('baseline', `${manifest.baseline!.path} recorded other layers`);
  for (const line of baselineLayerProblems(manifest, base)) problem('manifest.json', line);
}

function describeType(type: DataType): string {
  return String(type);
}

/** Schema and rows of one layer file. */
async function checkLayerFile(path: string, subject: string, entry: ManifestLayer, firstIndex: number, count: number, problem: (s: string, m: string) => void): Promise<void> {
  const channels = channelCount(entry.shape, layerLayout(entry));
  const elements = channels * spatialSize(entry.shape, layerLayout(entry));
  registerArrowCodecs(); // compressed layer files are read through apache-arrow's codec registry
  const handle = await open(path, 'r');
  try {
    let reader;
    try {
      reader = await RecordBatchReader.from(handle);
      await reader.open();
    } catch (error) {
      problem(subject, `is not a readable Arrow file (${firstLine(error)})`);
      return;
    }
    if (!reader.isFile()) {
      problem(subject, 'is not in Arrow IPC file format');
      return;
    }
    const schemaProblem = layerSchemaProblem(reader.schema, entry, channels, elements);
    if (schemaProblem) {
      problem(subject, schemaProblem);
      return;
    }
    let rows = 0;
    let next = firstIndex;
    // Sonde's layout (the schema just matched): the index buffer alone, decompressed within its batch's
    // bounds, never the activations; the general reader otherwise
    let blocks: LayerBlockFile | null = null;
    try {
      blocks = LayerBlockFile.open(path);
    } catch {
      blocks = null;
    }
    try {
      const batches = blocks ? blocks.count : reader.numRecordBatches;
      for (let b = 0; b < batches; b++) {
        let index: Int32Array;
        try {
          if (blocks) index = blocks.readMeansSync(b).index;
          else {
            const batch = await reader.readRecordBatch(b);
            if (!batch) break;
            index = batch.getChild('index')!.toArray() as Int32Array;
          }
        } catch (error) {
          problem(subject, `batch ${b} cannot be read (${firstLine(error)})`);
          return;
        }
        for (let r = 0; r < index.length; r++) {
          if (index[r] !== next) {
            problem(subject, `row ${rows + r} has stimulus index ${index[r]}, expected ${next} (indices must run ${firstIndex}..${firstIndex + count - 1} in order)`);
            return;
          }
          next++;
        }
        rows += index.length;
      }
    } finally {
      blocks?.close();
    }
    if (entry.rows !== undefined && rows !== entry.rows) problem(subject, `holds ${rows} rows, the manifest says ${entry.rows}`);
    if (rows !== count) problem(subject, `holds ${rows} rows, the snapshot has ${count} stimuli`);
  } finally {
    await handle.close();
  }
}

function layerSchemaProblem(schema: Schema, entry: ManifestLayer, channels: number, elements: number): string | null {
  const names = schema.fields.map((f) => f.name);
  const wanted = entry.keep === 'full' ? ['index', 'channel_mean', 'activation'] : ['index', 'channel_mean'];
  if (names.join(',') !== wanted.join(',')) return `has columns [${names.join(', ')}], expected [${wanted.join(', ')}] (keep = ${entry.keep})`;
  const [index, means, activation] = schema.fields as [Field, Field, Field | undefined];
  if (!DataType.isInt(index.type) || index.type.bitWidth !== 32) return `column index is ${describeType(index.type)}, expected int32`;
  const list = (field: Field, width: number, item: 'float32' | 'float16'): string | null => {
    if (!DataType.isFixedSizeList(field.type)) return `column ${field.name} is ${describeType(field.type)}, expected a fixed-size list of ${width} ${item}`;
    if (field.type.listSize !== width) return `column ${field.name} has ${field.type.listSize} values per row, the manifest shape [${entry.shape.join(', ')}] gives ${width}`;
    const child = field.type.children[0]!.type;
    const precision = DataType.isFloat(child) ? child.precision : -1;
    if (precision !== (item === 'float16' ? 0 : 1)) return `column ${field.name} holds ${describeType(child)}, expected ${item}`;
    return null;
  };
  const meanProblem = list(means, channels, 'float32');
  if (meanProblem) return meanProblem;
  if (activation) {
    const activationProblem = list(activation, elements, entry.dtype);
    if (activationProblem) return activationProblem;
    const shape = activation.metadata.get(SHAPE_METADATA_KEY);
    if (shape !== JSON.stringify(entry.shape)) return `column activation carries shape ${shape ?? 'none'}, the manifest says ${JSON.stringify(entry.shape)}`;
  }
  return null;
}

function checkStimuli(root: string, manifest: SnapshotManifest, firstIndex: number, problem: (s: string, m: string) => void, notes: string[]): void {
  const path = join(root, 'stimuli.arrow');
  if (!existsSync(path)) {
    problem('stimuli.arrow', 'is missing');
    return;
  }
  const unsafe = escapes(root, path) ?? notRegular(path);
  if (unsafe) {
    problem('stimuli.arrow', unsafe);
    return;
  }
  let bytes: Uint8Array;
  try {
    bytes = readInputFile(path, 'it', INPUT_LIMITS.table);
  } catch (error) {
    problem('stimuli.arrow', firstLine(error).replace(/^it /, ''));
    return;
  }
  for (const line of verifyStimulusTable(bytes, manifest, { firstIndex, all: true }).problems) problem('stimuli.arrow', line);
  if (manifest.shard) notes.push('the listing digest covers the whole listing and is checked when the shards are merged');
}
