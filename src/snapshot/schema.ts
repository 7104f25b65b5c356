/**
 * The schema (zod) of the snapshot manifest; the sidecar's is in graph/sidecar.ts, the partial file's
 * envelope in record/partial-file.ts. Every field is checked for its type and range, so a value of
 * the wrong type is refused with its field path (`layers[2].depth must be a non-negative integer, got
 * "x"`) instead of flowing into a computation. Unknown keys are kept (newer builds may add fields);
 * what the fields mean is documented beside their interfaces (manifest.ts, graph/sidecar.ts,
 * record/partial-file.ts). Cross-field rules (unique names, paths inside the folder, shard ranges)
 * are checked by the readers after the schema.
 */
import { z } from 'zod';
import { readoutSchema } from '../graph/sidecar.js';

const count = z.number().int().nonnegative().max(Number.MAX_SAFE_INTEGER);
const positive = z.number().int().positive().max(Number.MAX_SAFE_INTEGER);
const finite = z.number().finite();
const hex64 = z.string().regex(/^[0-9a-f]{64}$/, 'must be 64 lower-case hex digits');
const plainString = z.string().refine((s) => !s.includes('\0'), 'must not contain a NUL character');

/** Preprocessing as a manifest records it (all fields set). */
const preprocessingSchema = z.looseObject({
  size: z.tuple([positive, positive]),
  mean: z.array(finite).min(1),
  std: z.array(finite.refine((v) => v !== 0, 'must not be 0')).min(1),
  bgr: z.boolean(),
});

const shardSchema = z.looseObject({
  index: positive,
  count: positive,
  stimuli: z.tuple([count, count]),
  total: positive,
});

/** A tensor layout (src/graph/layout.ts); its fit to the layer's shape is checked by `readManifest`. */
const layoutSchema = z.looseObject({
  kind: z.enum(['channels-first', 'channels-last', 'tokens', 'heads', 'vector', 'scalar']),
  featureAxis: z.number().int().nonnegative().max(7).nullable(),
  source: z.enum(['graph', 'sidecar', 'shape']),
  grid: z.looseObject({ prefix: count, height: positive, width: positive }).optional(),
  heads: positive.optional(),
});

const layerSchema = z.looseObject({
  name: z.string().min(1),
  op: z.string(),
  depth: count,
  weightDepth: count.optional(),
  shape: z.array(positive).max(8),
  dtype: z.enum(['float32', 'float16']),
  keep: z.enum(['full', 'channels']),
  file: plainString.min(1),
  from: z.literal('baseline').optional(),
  sha256: hex64.optional(),
  bytes: count.optional(),
  rows: count.optional(),
  nonFinite: count.optional(),
  compression: z.enum(['lz4', 'zstd']).optional(),
  means: z.looseObject({ file: plainString.min(1), sha256: hex64, bytes: count }).optional(),
  layout: layoutSchema.optional(),
});

/** `manifest.json` of a snapshot (formats 2 and 3). */
export const manifestSchema = z.looseObject({
  format: z.number(),
  tool: z.looseObject({ name: z.string(), version: z.string() }),
  model: z.looseObject({ file: z.string(), sha256: z.string().min(1), input: z.looseObject({ name: z.string(), shape: z.array(z.number().int().nonnegative()) }) }),
  stimuli: z.looseObject({
    source: z.string(),
    count,
    digest: z.string(),
    listingDigest: z.string(),
    categories: z.array(z.string()),
    nonFinite: count.optional(),
    table: z.looseObject({ sha256: hex64, bytes: count }).optional(),
  }),
  preprocessing: preprocessingSchema.nullable(),
  modulation: z.unknown(),
  readout: readoutSchema.nullable().optional(),
  baseline: z.looseObject({ path: plainString.min(1), manifestSha256: hex64 }).nullable().optional(),
  run: z.looseObject({
    mode: z.enum(['full', 'tail']),
    reason: z.string().optional(),
    batch: positive,
    threads: count,
    wallSeconds: z.number().nonnegative().optional(),
  }),
  created: z.string(),
  layers: z.array(layerSchema),
  shard: shardSchema.nullable().optional(),
  complete: z.boolean(),
  error: z.string().optional(),
});

