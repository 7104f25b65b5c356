/**
 * `mergeSnapshots`: joins the shard snapshots of one recording (`record --shard K/N`, K = 1..N) into one
 * snapshot, as if it had been recorded in one run.
 *
 * The parts must pair: same model (sha256), same stimulus listing (listing digest and count), same
 * preprocessing, modulation, readout, batch size and layers (name, operator, depth, shape, dtype, keep,
 * file), all N shards of the same N present once, and each shard covering exactly its range of the
 * deterministic split — so together they are disjoint and cover the listing in order.
 *
 * Layer files are rewritten: rows are re-cut into batches of the recording's batch size aligned at
 * stimulus 0, the stored columns are copied as they are (channel means are not recomputed, float16 bit
 * patterns are not widened), compressed with the parts' codec, each full layer with its channel-means
 * file. An unsharded recording with the same batch size cuts its batches the same
 * way, so with deterministic runtime output (`--threads 1`) the merged layer files are byte-identical to
 * the unsharded run's. `stimuli.arrow` is the parts' rows in order; the stimuli digest is recomputed over
 * the per-stimulus digests and so equals the unsharded run's.
 *
 * Modulated parts recorded from baseline shards point at those shards; the merged snapshot points at
 * `baseline` when one is given (a merged baseline that must pair with it), and layers whose merged file
 * equals the baseline's (same SHA-256) are referenced from it instead of being kept twice — exactly as a
 * tail replay from an unsharded baseline references them. Without `baseline` the merged snapshot keeps
 * every layer's file and names no baseline.
 */
import { createHash } from 'node:crypto';
import { readFileSync, rmSync } from 'node:fs';
import { join, relative } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import { LayerFileWriter, manifestFields, meansFileName, type LayerFileResult } from '../snapshot/layer-file.js';
import { FORMAT_VERSION, layerLayout, writeManifest, type ManifestLayer, type SnapshotManifest } from '../snapshot/manifest.js';
import { openSnapshot, type Snapshot } from '../snapshot/snapshot.js';
import { STIMULUS_DIGEST_BYTES, stimuliDigest, writeStimuliFile } from '../snapshot/stimuli-file.js';
import { listingDigest } from '../stimuli/source.js';
import { TOOL_VERSION } from '../version.js';
import { assertApartFromInputs, openOutputFolder, resolveOutFolder } from '../outputs/output-folder.js';
import { displayPath, markIncomplete } from './record-snapshot.js';
import { shardRange } from './shard.js';

/** Options of `mergeSnapshots`. */
export interface MergeOptions {
  /** The shard snapshot folders, in any order. */
  parts: readonly string[];
  /** Output folder (a bare name goes under `snapshots/`). */
  out: string;
  /** For modulated parts: the merged baseline the result pairs with. */
  baseline?: string;
  /** Replace a complete snapshot in `out`. */
  force?: boolean;
  /** One-line notices (a stale lock taken over). */
  onNotice?: (text: string) => void;
  /** Called after each layer. */
  onLayer?: (done: number, total: number, name: string) => void;
}

/** What `mergeSnapshots` returns. */
export interface MergeSummary {
  folder: string;
  manifest: SnapshotManifest;
  parts: number;
  stimuli: number;
  layers: number;
  /** Bytes of the files written. */
  bytesWritten: number;
  /** Layers referenced from the baseline instead of written. */
  fromBaseline: number;
}

/**
 * Merges shard snapshots into one (see the file comment).
 * @param options parts, out, baseline, force.
 * @returns the merged folder, its manifest and counts.
 * @throws UsageError when fewer than one part is given, a part is not a complete shard snapshot, the
 *   parts do not pair (the message names the first difference), a shard is missing or given twice, or the
 *   baseline does not pair with the merged stimuli; RuntimeFailure when a file cannot be read or written
 *   (the output then stays marked incomplete).
 */
export async function mergeSnapshots(options: MergeOptions): Promise<MergeSummary> {
  if (options.parts.length === 0) throw new UsageError('E_MERGE', 'merge needs at least one part');
  assertApartFromInputs(resolveOutFolder(options.out), '--out', [...options.parts.map((path, i) => ({ option: `part ${i + 1}`, path })), { option: '--baseline', path: options.baseline }]);
  const parts = options.parts.map((p) => openSnapshot(p));
  parts.forEach((part, i) => {
    if (!part.manifest.shard) throw new UsageError('E_MERGE', `${options.parts[i]} is not a shard snapshot (recorded without --shard); only shards of one recording can be merged`);
  });
  const ordered = orderShards(parts, options.parts);
  const first = ordered[0]!;
  const template = first.manifest;

  // joined stimuli: ids, labels and per-stimulus digests in order; the listing must be the parts' own
  const ids: string[] = [];
  const labels: string[][] = [];
  const total = template.shard!.total;
  const digests = new Uint8Array(total * STIMULUS_DIGEST_BYTES);
  for (const part of ordered) {
    if (!part.stimuli.digests) throw new UsageError('E_MERGE', `${part.folder}: stimuli.arrow has no per-stimulus digests`, { hint: 'record the shards again with this version' });
    digests.set(part.stimuli.digests, ids.length * STIMULUS_DIGEST_BYTES);
    ids.push(...part.stimuli.ids);
    labels.push(...part.stimuli.labels);
  }
  if (listingDigest({ ids, labels }) !== template.stimuli.listingDigest) {
    throw new UsageError('E_MERGE', 'the merged stimulus ids and labels do not reproduce the listing digest the shards recorded (a part\'s stimuli.arrow was changed)', { hint: 'run `sonde check` on each part' });
  }
  const digest = stimuliDigest(digests);

  let baseline: Snapshot | null = null;
  let baselineRef: SnapshotManifest['baseline'] = null;
  const folder = resolveOutFolder(options.out);
  if (options.baseline !== undefined) {
    if (template.modulation === null) throw new UsageError('E_MERGE', '--baseline applies to modulated parts; these parts are baselines themselves');
    baseline = openSnapshot(options.baseline);
    if (baseline.manifest.model.sha256 !== template.model.sha256) throw new UsageError('E_PAIRING', `--baseline ${options.baseline} was recorded from another model than the parts`);
    if (baseline.manifest.stimuli.digest !== digest) throw new UsageError('E_PAIRING', `--baseline ${options.baseline} was recorded on other stimuli than the merged parts (stimuli digests differ)`, { hint: 'merge the baseline shards first and pass the merged baseline' });
    const names = (m: SnapshotManifest) => m.layers.map((l) => l.name).join('\n');
    if (names(baseline.manifest) !== names(template)) throw new UsageError('E_PAIRING', `--baseline ${options.baseline} recorded other layers than the parts`);
    baselineRef = { path: relative(folder, baseline.folder) || '.', manifestSha256: createHash('sha256').update(readFileSync(join(baseline.folder, 'manifest.json'))).digest('hex') };
  }

  // NaN/±Inf counts add up over the parts (kept only when every part counted them)
  const sumOver = (pick: (m: SnapshotManifest) => number | undefined): number | undefined => (ordered.every((p) => pick(p.manifest) !== undefined) ? ordered.reduce((sum, p) => sum + pick(p.manifest)!, 0) : undefined);
  const layers: ManifestLayer[] = template.layers.map((l, i) => {
    const { sha256: _s, bytes: _b, rows: _r, from: _f, nonFinite: _n, means: _m, ...rest } = l;
    const nonFinite = sumOver((m) => m.layers[i]?.nonFinite);
    return { ...rest, ...(nonFinite !== undefined ? { nonFinite } : {}) };
  });
  const fedNonFinite = sumOver((m) => m.stimuli.nonFinite);
  const manifest: SnapshotManifest = {
    format: FORMAT_VERSION,
    tool: { name: 'sonde', version: TOOL_VERSION },
    model: template.model,
    stimuli: { source: template.stimuli.source, count: total, digest, listingDigest: template.stimuli.listingDigest, categories: template.stimuli.categories, ...(fedNonFinite !== undefined ? { nonFinite: fedNonFinite } : {}) },
    preprocessing: template.preprocessing,
    modulation: template.modulation,
    readout: template.readout ?? null,
    baseline: baselineRef,
    run: { ...template.run, wallSeconds: Math.round(ordered.reduce((sum, p) => sum + (p.manifest.run.wallSeconds ?? 0), 0) * 1000) / 1000 },
    created: new Date().toISOString(),
    layers,
    complete: false,
  };

  const opened = openOutputFolder(folder, { force: options.force ?? false, resume: false, ...(options.onNotice ? { onNotice: options.onNotice } : {}) });
  try {
    writeManifest(folder, manifest);
    let bytesWritten = 0;
    let fromBaseline = 0;
    try {
      for (let i = 0; i < layers.length; i++) {
        const entry = layers[i]!;
        const result = await mergeLayer(ordered, entry, join(folder, entry.file), template.run.batch, total);
        const baseEntry = baseline?.manifest.layers[i];
        if (baseEntry && baseEntry.sha256 === result.sha256 && baseEntry.keep === entry.keep && baseEntry.dtype === entry.dtype && baseEntry.means?.sha256 === result.means?.sha256) {
          rmSync(join(folder, entry.file), { force: true });
          rmSync(join(folder, meansFileName(entry.file)), { force: true });
          layers[i] = { ...baseEntry, from: 'baseline' };
          fromBaseline++;
        } else {
          Object.assign(entry, manifestFields(entry.file, result));
          bytesWritten += result.bytes + (result.means?.bytes ?? 0);
        }
        options.onLayer?.(i + 1, layers.length, entry.name);
      }
      const stimuliFile = writeStimuliFile(join(folder, 'stimuli.arrow'), ids, labels, { digests });
      bytesWritten += stimuliFile.bytes;
      manifest.stimuli.table = { sha256: stimuliFile.sha256, bytes: stimuliFile.bytes };
      manifest.complete = true;
      writeManifest(folder, manifest);
    } catch (error) {
      // merge has no --resume: run again, it replaces the incomplete folder
      throw markIncomplete(folder, manifest, error, 'run the same merge again');
    }
    return { folder, manifest, parts: ordered.length, stimuli: total, layers: layers.length, bytesWritten, fromBaseline };
  } finally {
    opened.lock.release();
  }

  function orderShards(snapshots: Snapshot[], paths: readonly string[]): Snapshot[] {
    const reference = snapshots[0]!.manifest;
    const key = (m: SnapshotManifest) => ({
      model: m.model.sha256,
      listing: [m.stimuli.listingDigest, m.shard!.total],
      shards: m.shard!.count,
      preprocessing: m.preprocessing,
      modulation: m.modulation,
      readout: m.readout ?? null,
      batch: m.run.batch,
      layers: m.layers.map((l) => [l.name, l.op, l.depth, l.shape, l.dtype, l.keep, l.file]),
    });
    const wanted = key(reference);
    const labelsOf: Record<string, string> = { model: 'model', listing: 'stimulus listing', shards: 'shard count N', preprocessing: 'preprocessing', modulation: 'modulation', readout: 'readout', batch: '--batch', layers: 'layers' };
    snapshots.forEach((s, i) => {
      const got = key(s.manifest);
      for (const field of Object.keys(wanted) as Array<keyof typeof wanted>) {
        if (JSON.stringify(got[field]) !== JSON.stringify(wanted[field])) {
          throw new UsageError('E_PAIRING', `${paths[i]} does not pair with ${paths[0]}: other ${labelsOf[field]}`, { hint: 'merge only the shards of one recording' });
        }
      }
    });
    const n = reference.shard!.count;
    const byIndex = new Map<number, number>();
    snapshots.forEach((s, i) => {
      const k = s.manifest.shard!.index;
      const earlier = byIndex.get(k);
      if (earlier !== undefined) throw new UsageError('E_MERGE', `shard ${k}/${n} is given twice (${paths[earlier]} and ${paths[i]})`);
      byIndex.set(k, i);
    });
    const missing: number[] = [];
    for (let k = 1; k <= n; k++) if (!byIndex.has(k)) missing.push(k);
    if (missing.length > 0) throw new UsageError('E_MERGE', `shard${missing.length > 1 ? 's' : ''} ${missing.map((k) => `${k}/${n}`).join(', ')} missing (got ${snapshots.length} of ${n})`);
    const result: Snapshot[] = [];
    for (let k = 1; k <= n; k++) {
      const s = snapshots[byIndex.get(k)!]!;
      const range = shardRange(k, n, reference.shard!.total);
      const [a, b] = s.manifest.shard!.stimuli;
      if (a !== range.start || b !== range.end - 1) throw new UsageError('E_MERGE', `${paths[byIndex.get(k)!]}: shard ${k}/${n} holds stimuli ${a}..${b}, but the split gives ${range.start}..${range.end - 1}`);
      result.push(s);
    }
    return result;
  }
}

/** Copies one layer from every part, in order, into batches of `batch` rows aligned at stimulus 0. */
async function mergeLayer(parts: readonly Snapshot[], entry: ManifestLayer, path: string, batch: number, total: number): Promise<LayerFileResult> {
  const geometry = parts[0]!.layerGeometry(entry.name);
  const C = geometry.channels;
  const E = geometry.elements;
  const full = entry.keep === 'full';
  const half = entry.dtype === 'float16';
  const writer = new LayerFileWriter(path, { name: entry.name, shape: entry.shape, dtype: entry.dtype, keep: entry.keep, layout: layerLayout(entry), compression: entry.compression ?? 'none' });
  const means = new Float32Array(batch * C);
  const values32 = full && !half ? new Float32Array(batch * E) : null;
  const values16 = full && half ? new Uint16Array(batch * E) : null;
  let filled = 0;
  let next = 0; // global index of the next row expected
  const flush = () => {
    if (filled === 0) return;
    writer.writeColumns(next - filled, filled, means.subarray(0, filled * C), values32 ? values32.subarray(0, filled * E) : values16 ? values16.subarray(0, filled * E) : null);
    filled = 0;
  };
  try {
    for (const part of parts) {
      for await (const b of part.readLayer(entry.name, { raw: true })) {
        for (let r = 0; r < b.rows; r++) {
          if (b.index[r] !== next) throw new RuntimeFailure('E_MERGE', `layer "${entry.name}" of ${displayPath(part.folder)}: stimulus ${b.index[r]} where ${next} was expected`, { hint: 'run `sonde check` on the part' });
          means.set(b.channelMeans.subarray(r * C, (r + 1) * C), filled * C);
          if (values32) values32.set(b.activation!.subarray(r * E, (r + 1) * E), filled * E);
          if (values16) values16.set(b.activationFloat16!.subarray(r * E, (r + 1) * E), filled * E);
          filled++;
          next++;
          if (filled === batch) flush();
        }
      }
    }
    flush();
    if (next !== total) throw new RuntimeFailure('E_MERGE', `layer "${entry.name}": the parts hold ${next} stimuli, the listing ${total}`);
    return writer.finish();
  } catch (error) {
    writer.discard();
    throw error;
  }
}
