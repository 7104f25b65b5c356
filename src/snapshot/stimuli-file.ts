import { Field, Int32, List, makeBuilder, makeData, RecordBatch, RecordBatchFileWriter, Schema, Struct, Utf8, type Data } from 'apache-arrow';
import { createHash } from 'node:crypto';
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
