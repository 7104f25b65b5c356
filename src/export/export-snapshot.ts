/**
 * `sonde export`: chosen layers of a snapshot as NumPy `.npy` arrays (memory-mappable, float32 or float16
 * as stored) plus `export.json`, the coordinates an xarray user needs to label them. Layers of a
 * modulated snapshot that live in its baseline (`from: "baseline"`) are read through the baseline, so an
 * export is always self-contained. One streaming pass per layer: memory holds two record batches, and
 * every layer file is checked against its manifest (size, SHA-256) before the export of it is renamed
 * into place.
 */
import { createHash } from 'node:crypto';
import { existsSync, mkdirSync, readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { RuntimeFailure } from '../errors.js';
import { TOOL_VERSION } from '../version.js';
import { acquireLock } from '../disk/lock.js';
import { replaceFile } from '../disk/atomic-file.js';
import { selectLayers } from '../graph/select.js';
import { formatNpyHeader } from '../stimuli/npy.js';
import { HashingFileSink } from '../snapshot/arrow-sink.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { layerLayout, type ManifestLayer } from '../snapshot/manifest.js';
import { assertApartFromInputs, slugify } from '../outputs/output-folder.js';
import { assertExportFolderUsable, EXPORT_FILE, prepareExportFolder } from '../outputs/export-folder.js';
import { axisNames, EXPORT_FORMAT, type ExportArrayFile, type ExportDescription, type ExportLayer } from './export-description.js';

/** Options of `exportSnapshot`. */
export interface ExportOptions {
  /** The snapshot folder (a baseline, or a modulated snapshot recorded with `--from`). */
  snapshot: string;
  /** The export folder (created; an earlier export there is replaced only with `force`). */
  out: string;
  /** Layer selector (`all`, names, globs, `op:Relu`, joined by `+`; see `selectLayers`). Default: every recorded layer. */
  layers?: string;
  /** Replace a complete earlier export in `out`. */
  force?: boolean;
  /** Write float16 layers widened to float32 (`<f4`, exact) for readers without half precision. Default false: as stored. */
  float32?: boolean;
  /** Called after every record batch written. */
  onProgress?: (progress: { layer: string; layerIndex: number; layers: number; rows: number; totalRows: number; bytesWritten: number }) => void;
}

/** What `exportSnapshot` wrote. */
export interface ExportResult {
  /** Absolute path of the export folder. */
  folder: string;
  description: ExportDescription;
  /** Layers whose file was read from the snapshot's baseline. */
  fromBaseline: number;
  /** Bytes of array files written. */
  bytesWritten: number;
}

/**
 * Exports layers of a snapshot to `.npy` files and `export.json` (see `ExportDescription`).
 * @throws UsageError for a missing or malformed snapshot, a selector that matches nothing, an `out` that
 *   is or contains an input, a foreign or (without `force`) already exported `out`; RuntimeFailure for an
 *   incomplete snapshot, a layer file that fails its size or SHA-256 check or is out of index order, or a
 *   failed write. A failure leaves `export.json` saying `complete: false` and no array file of the layer
 *   being written.
 */
export async function exportSnapshot(options: ExportOptions): Promise<ExportResult> {
  const snapshot = openSnapshot(options.snapshot);
  const folder = resolve(options.out);
  const baselineFolder = snapshot.manifest.baseline ? resolve(snapshot.folder, snapshot.manifest.baseline.path) : null;
  assertApartFromInputs(folder, '--out', [
    { option: 'SNAPSHOT', path: snapshot.folder },
    ...(baselineFolder ? [{ option: `the baseline of ${options.snapshot}`, path: baselineFolder }] : []),
  ]);
  const chosen = selectLayers(snapshot.manifest.layers.map((l) => ({ ...l, default: true })), options.layers ?? 'all');
  if (baselineFolder && chosen.some((l) => l.from === 'baseline')) assertBaselineUnchanged(snapshot, baselineFolder);
  assertExportFolderUsable(folder, options.force === true); // refuse before the lock file is written into it
  mkdirSync(folder, { recursive: true });
  const lock = acquireLock(folder, { label: `export folder ${options.out}` });
  try {
    prepareExportFolder(folder, options.force === true);
    const count = snapshot.manifest.stimuli.count;
    const description: ExportDescription = {
      format: EXPORT_FORMAT,
      kind: 'sonde-export',
      tool: { name: 'sonde', version: TOOL_VERSION },
      created: new Date().toISOString(),
      complete: false,
      snapshot: {
        path: snapshot.folder,
        manifestSha256: sha256File(join(snapshot.folder, 'manifest.json')),
        baseline: baselineFolder,
      },
      model: snapshot.manifest.model,
      readout: snapshot.manifest.readout ?? null,
      modulation: snapshot.manifest.modulation ?? null,
      stimuli: {
        count,
        firstIndex: snapshot.firstIndex,
        index: Array.from({ length: count }, (_, i) => snapshot.firstIndex + i),
        id: snapshot.stimuli.ids,
        labels: snapshot.stimuli.labels,
        categories: snapshot.manifest.stimuli.categories ?? snapshot.categories,
      },
      layers: [],
    };
    const writeDescription = () => replaceFile(join(folder, EXPORT_FILE), `${JSON.stringify(description, null, 1)}\n`);
    writeDescription();
    let bytesWritten = 0;
    for (let i = 0; i < chosen.length; i++) {
      const entry = snapshot.layer(chosen[i]!.name);
      const stem = `layers/${String(i).padStart(3, '0')}-${slugify(entry.name)}`;
      const layer = await exportLayer(snapshot, entry, folder, stem, options.float32 === true, (rows, bytes) => options.onProgress?.({ layer: entry.name, layerIndex: i, layers: chosen.length, rows, totalRows: count, bytesWritten: bytesWritten + bytes }));
      bytesWritten += (layer.activation?.bytes ?? 0) + layer.channelMeans.bytes;
      description.layers.push(layer);
      writeDescription();
    }
    description.complete = true;
    writeDescription();
    return { folder, description, fromBaseline: chosen.filter((l) => l.from === 'baseline').length, bytesWritten };
  } finally {
    lock.release();
  }
}

/** One layer: activations (when kept) and channel means, streamed batch by batch into two `.npy` files. */
async function exportLayer(snapshot: Snapshot, entry: ManifestLayer, folder: string, stem: string, widen: boolean, progress: (rows: number, bytes: number) => void): Promise<ExportLayer> {
  const count = snapshot.manifest.stimuli.count;
  const { channels, elements } = snapshot.layerGeometry(entry.name);
  const full = entry.keep === 'full';
  const half = entry.dtype === 'float16' && !widen; // float16 written as its stored bits
  const activationShape = [count, ...entry.shape];
  const meansShape = [count, channels];
  const activationSink = full ? new HashingFileSink(join(folder, `${stem}.npy`)) : null;
  const meansSink = new HashingFileSink(join(folder, `${stem}.means.npy`));
  try {
    activationSink?.write(formatNpyHeader(half ? '<f2' : '<f4', activationShape));
    meansSink.write(formatNpyHeader('<f4', meansShape));
    let rows = 0;
    // raw: float16 layers keep their stored bit patterns (unless widened); reuse: two read buffers, bounded memory
    for await (const batch of snapshot.readLayer(entry.name, { activation: full, raw: half, reuse: true })) {
      for (let r = 0; r < batch.rows; r++) {
        if (batch.index[r] !== snapshot.firstIndex + rows + r) {
          throw new RuntimeFailure('E_LAYER_READ', `layer "${entry.name}" of ${snapshot.folder}: row ${rows + r} holds stimulus ${batch.index[r]}, expected ${snapshot.firstIndex + rows + r} (rows out of index order)`, { hint: 'run `sonde check` on the snapshot' });
        }
      }
      if (activationSink) {
        const values = half ? batch.activationFloat16 : batch.activation;
        if (!values || values.length !== batch.rows * elements) throw new RuntimeFailure('E_LAYER_SCHEMA', `layer "${entry.name}" of ${snapshot.folder}: a batch lacks its ${entry.dtype} activations`);
        activationSink.write(values);
      }
      meansSink.write(batch.channelMeans);
      rows += batch.rows;
      progress(rows, (activationSink?.byteLength ?? 0) + meansSink.byteLength);
    }
    if (rows !== count) throw new RuntimeFailure('E_LAYER_READ', `layer "${entry.name}" of ${snapshot.folder} holds ${rows} rows, the snapshot has ${count} stimuli`, { hint: 'run `sonde check` on the snapshot' });
    const activation = activationSink ? arrayFile(`${stem}.npy`, half ? 'float16' : 'float32', activationShape, activationSink.commit()) : null;
    const channelMeans = arrayFile(`${stem}.means.npy`, 'float32', meansShape, meansSink.commit());
    return {
      name: entry.name,
      op: entry.op,
      depth: entry.depth,
      ...(entry.weightDepth !== undefined ? { weightDepth: entry.weightDepth } : {}),
      shape: entry.shape,
      dims: axisNames(entry.shape.length, layerLayout(entry)),
      ...(entry.layout ? { layout: entry.layout } : {}),
      channels,
      dtype: entry.dtype,
      keep: entry.keep,
      source: entry.from === 'baseline' ? 'baseline' : 'snapshot',
      ...(entry.nonFinite !== undefined ? { nonFinite: entry.nonFinite } : {}),
      activation,
      channelMeans,
    };
  } catch (error) {
    activationSink?.discard();
    meansSink.discard();
    throw error;
  }
}

function arrayFile(file: string, dtype: 'float32' | 'float16', shape: number[], written: { sha256: string; bytes: number }): ExportArrayFile {
  return { file, dtype, shape, sha256: written.sha256, bytes: written.bytes };
}

function sha256File(path: string): string {
  return createHash('sha256').update(readFileSync(path)).digest('hex');
}

/**
 * A modulated snapshot pairs with the baseline it was recorded from (its manifest's SHA-256 is in the
 * modulated manifest): a baseline recorded again into the same folder would mix two recordings.
 * @throws RuntimeFailure E_PAIRING naming both folders.
 */
function assertBaselineUnchanged(snapshot: Snapshot, baselineFolder: string): void {
  const manifest = join(baselineFolder, 'manifest.json');
  if (!existsSync(manifest)) throw new RuntimeFailure('E_PAIRING', `${snapshot.folder} reads layers from its baseline ${baselineFolder}, which has no manifest.json`, { hint: 'the baseline was moved or deleted; export needs it next to the snapshot as recorded' });
  const expected = snapshot.manifest.baseline!.manifestSha256;
  if (sha256File(manifest) !== expected) {
    throw new RuntimeFailure('E_PAIRING', `the baseline ${baselineFolder} of ${snapshot.folder} changed since the snapshot was recorded (manifest SHA-256 differs)`, { hint: 'record the modulated snapshot again from this baseline' });
  }
}
