import { Field, Int32, List, makeBuilder, makeData, RecordBatch, RecordBatchFileWriter, Schema, Struct, tableFromIPC, Utf8, type Data } from 'apache-arrow';
import { createHash } from 'node:crypto';
import { listingDigest } from '../stimuli/source.js';
import type { SnapshotManifest } from './manifest.js';
import { HashingFileSink } from './arrow-sink.js';

/** Bytes of one per-stimulus digest (SHA-256). */
export const STIMULUS_DIGEST_BYTES = 32;

/**
 * Schema of `stimuli.arrow`: `index` int32 (global stimulus index), `id` utf8, `labels` list<utf8>, and
 * with digests `sha256` utf8 (hex SHA-256 of the stimulus's input bytes as fed to the network).
 */
export function stimuliSchema(withDigests = false): Schema {
  const fields = [
    new Field('index', new Int32(), false),
    new Field('id', new Utf8(), false),
    new Field('labels', new List(new Field('item', new Utf8(), false)), false),
  ];
  if (withDigests) fields.push(new Field('sha256', new Utf8(), false));
  return new Schema(fields);
}

/**
 * Writes `stimuli.arrow` (one row per stimulus) under a temporary name, then renames it.
 * @param path final file name.
 * @param ids, labels one entry per stimulus.
 * @param options `digests`: ids.length × 32 bytes, the per-stimulus SHA-256 digests (column `sha256`);
 *   `firstIndex`: global index of the first row (a shard's first stimulus; default 0).
 * @returns the file's SHA-256 and size.
 * @throws RuntimeFailure when the file cannot be written; RangeError when `digests` has the wrong size.
 */
export function writeStimuliFile(path: string, ids: readonly string[], labels: readonly string[][], options: { digests?: Uint8Array; firstIndex?: number } = {}): { sha256: string; bytes: number } {
  const digests = options.digests;
  const schema = stimuliSchema(digests !== undefined);
  const count = ids.length;
  const firstIndex = options.firstIndex ?? 0;
  const index = new Int32Array(count);
  for (let i = 0; i < count; i++) index[i] = firstIndex + i;
  const idBuilder = makeBuilder({ type: new Utf8(), nullValues: [] });
  for (const id of ids) idBuilder.append(id);
  const labelBuilder = makeBuilder({ type: new List(new Field('item', new Utf8(), false)), nullValues: [] });
  for (const set of labels) labelBuilder.append(set as never);
  const children: Data[] = [makeData({ type: new Int32(), length: count, nullCount: 0, data: index }), idBuilder.finish().flush(), labelBuilder.finish().flush()];
  if (digests !== undefined) {
    if (digests.length !== count * STIMULUS_DIGEST_BYTES) throw new RangeError(`${path}: ${digests.length} digest bytes for ${count} stimuli`);
    const digestBuilder = makeBuilder({ type: new Utf8(), nullValues: [] });
    for (let i = 0; i < count; i++) digestBuilder.append(Buffer.from(digests.buffer, digests.byteOffset + i * STIMULUS_DIGEST_BYTES, STIMULUS_DIGEST_BYTES).toString('hex'));
    children.push(digestBuilder.finish().flush());
  }
  const struct = makeData({ type: new Struct(schema.fields), length: count, nullCount: 0, children });
  const sink = new HashingFileSink(path);
  try {
    const writer = new RecordBatchFileWriter();
    writer.reset(sink, schema);
    writer.write(new RecordBatch(schema, struct));
    writer.finish();
    writer.close();
    return sink.commit();
  } catch (error) {
    sink.discard();
    throw error;
  }
}

/**
 * The stimuli digest of a snapshot: SHA-256 over the per-stimulus SHA-256 digests, concatenated in index
 * order. Independent of batch size and of how the stimuli were split into shards.
 * @param digests N × 32 bytes.
 * @returns lower-case hex.
 */
export function stimuliDigest(digests: Uint8Array): string {
  return createHash('sha256').update(digests).digest('hex');
}

/** The stimulus table read back and checked: ids, label sets and per-stimulus digests in index order. */
export interface StimulusTable {
  ids: string[];
  labels: string[][];
  /** N × 32 bytes, when the table has the `sha256` column (format 2). */
  digests?: Uint8Array;
}

/**
 * Reads `stimuli.arrow` from its bytes and checks it against the manifest, as every reader must before
 * using a label: the file's SHA-256 and size (`stimuli.table`, when the manifest records them), the row
 * count, the index column (consecutive from the snapshot's first stimulus), the ids and labels against
 * `stimuli.listingDigest` (a whole listing; a shard's covers the whole listing and is checked at merge)
 * and the per-stimulus digests against `stimuli.digest`. A label changed in place, or the table of
 * another snapshot of the same length, therefore fails at least one of them.
 * @param bytes the file's content.
 * @param manifest the snapshot's manifest.
 * @param options `firstIndex`: the global index of the first row; `all`: collect every problem instead of
 *   stopping at the first (for `sonde check`).
 * @returns the table (null when it cannot be read at all) and the problems found, one line each.
 */
export function verifyStimulusTable(bytes: Uint8Array, manifest: SnapshotManifest, options: { firstIndex: number; all?: boolean }): { table: StimulusTable | null; problems: string[] } {
  const problems: string[] = [];
  const stop = () => problems.length > 0 && options.all !== true;
  const recorded = manifest.stimuli.table;
  if (recorded) {
    if (bytes.byteLength !== recorded.bytes) problems.push(`is ${bytes.byteLength} bytes, the manifest says ${recorded.bytes} (changed after recording)`);
    else if (createHash('sha256').update(bytes).digest('hex') !== recorded.sha256) problems.push('does not match the SHA-256 in the manifest (it changed after recording)');
    if (stop()) return { table: null, problems };
  }
  let table;
  try {
    table = tableFromIPC(bytes);
  } catch (error) {
    problems.push(`is not a readable Arrow file (${(error as Error).message.split('\n')[0]})`);
    return { table: null, problems };
  }
  const count = manifest.stimuli.count;
  if (table.numRows !== count) problems.push(`holds ${table.numRows} rows, the manifest says ${count} stimuli`);
  const index = table.getChild('index');
  const idColumn = table.getChild('id');
  const labelColumn = table.getChild('labels');
  if (!index || !idColumn || !labelColumn) {
    problems.push(`lacks the ${['index', 'id', 'labels'].filter((n) => !table.getChild(n)).join(', ')} column`);
    return { table: null, problems };
  }
  if (stop()) return { table: null, problems };
  for (let i = 0; i < table.numRows; i++) {
    if (index.get(i) !== options.firstIndex + i) {
      problems.push(`row ${i} has index ${String(index.get(i))}, expected ${options.firstIndex + i}`);
      break;
    }
  }
  if (stop()) return { table: null, problems };
  const ids: string[] = [];
  const labels: string[][] = [];
  for (let i = 0; i < table.numRows; i++) {
    ids.push(String(idColumn.get(i)));
    const value = labelColumn.get(i) as { toArray(): string[] } | null;
    labels.push(value ? Array.from(value.toArray()).map(String) : []);
  }
  if (!manifest.shard && listingDigest({ ids, labels }) !== manifest.stimuli.listingDigest) problems.push('ids and labels do not match the listing digest in the manifest (the table changed after recording)');
  if (stop()) return { table: null, problems };
  const digestColumn = table.getChild('sha256');
  if (!digestColumn) {
    problems.push('has no per-stimulus sha256 column, so the stimuli digest cannot be verified');
    return { table: null, problems };
  }
  const digests = new Uint8Array(table.numRows * STIMULUS_DIGEST_BYTES);
  for (let i = 0; i < table.numRows; i++) {
    const hex = String(digestColumn.get(i));
    if (!/^[0-9a-f]{64}$/.test(hex)) {
      problems.push(`row ${i} has no valid sha256`);
      return { table: null, problems };
    }
    digests.set(Buffer.from(hex, 'hex'), i * STIMULUS_DIGEST_BYTES);
  }
  if (stimuliDigest(digests) !== manifest.stimuli.digest) problems.push('the per-stimulus digests do not give the stimuli digest in the manifest (the table changed after recording)');
  return { table: problems.length === 0 ? { ids, labels, digests } : null, problems };
}
