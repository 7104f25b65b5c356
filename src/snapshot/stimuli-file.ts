import { Field, Int32, List, makeBuilder, makeData, RecordBatch, RecordBatchFileWriter, Schema, Struct, Utf8, type Data } from 'apache-arrow';
import { HashingFileSink } from './arrow-sink.js';

/** Schema of `stimuli.arrow`: `index` int32, `id` utf8, `labels` list<utf8>. */
export function stimuliSchema(): Schema {
  return new Schema([
    new Field('index', new Int32(), false),
    new Field('id', new Utf8(), false),
    new Field('labels', new List(new Field('item', new Utf8(), false)), false),
  ]);
}

/** Writes `stimuli.arrow` (one row per stimulus) under a temporary name, then renames it. */
export function writeStimuliFile(path: string, ids: readonly string[], labels: readonly string[][]): { sha256: string; bytes: number } {
  const schema = stimuliSchema();
  const count = ids.length;
  const index = new Int32Array(count);
  for (let i = 0; i < count; i++) index[i] = i;
  const idBuilder = makeBuilder({ type: new Utf8(), nullValues: [] });
  for (const id of ids) idBuilder.append(id);
  const labelBuilder = makeBuilder({ type: new List(new Field('item', new Utf8(), false)), nullValues: [] });
  for (const set of labels) labelBuilder.append(set as never);
  const children: Data[] = [makeData({ type: new Int32(), length: count, nullCount: 0, data: index }), idBuilder.finish().flush(), labelBuilder.finish().flush()];
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
