import { existsSync } from 'node:fs';
import { z } from 'zod';
import { UsageError } from '../errors.js';
import { parseJson, schemaProblem } from '../json.js';
import { INPUT_LIMITS, readInputText } from '../disk/input-file.js';
import type { LayoutDeclaration } from './infer-layout.js';

/** Optional JSON beside a model (`net.onnx` → `net.json`) that says how to feed and read it. */
export interface ModelSidecar {
  /** Preprocessing the network was trained with; used as defaults for `record`. */
  preprocessing?: { size?: [number, number]; mean?: number[]; std?: number[]; bgr?: boolean };
  /** The readout: output tensor name and the category of each of its units, in order. */
  outputs?: { name: string; kinds: string[]; threshold?: number };
  /** Tensors worth recording, with a short stage label. */
  layers?: Array<{ name: string; stage?: string }>;
  /**
   * Tensor layouts that override what the graph says (src/graph/infer-layout.ts): tensor name →
   * `{ kind, featureAxis?, grid?, heads? }`, e.g. `{ "conv_out_nhwc": { "kind": "channels-last" } }`.
   */
  layouts?: Record<string, LayoutDeclaration>;
}

const positive = z.number().int().positive().max(Number.MAX_SAFE_INTEGER);
const finite = z.number().finite();

/** A model's readout (sidecar `outputs`, manifest `readout`): output tensor, unit categories, optional finite threshold. */
export const readoutSchema = z.looseObject({
  name: z.string().min(1),
  kinds: z.array(z.string()),
  threshold: finite.optional(),
});

/** One sidecar layout declaration; unknown keys are refused (a misspelt `featureAxis` must not be ignored). */
export const layoutDeclarationSchema = z.strictObject({
  kind: z.enum(['channels-first', 'channels-last', 'tokens', 'heads', 'vector', 'scalar']),
  featureAxis: z.number().int().nonnegative().max(7).optional(),
  grid: z.strictObject({ prefix: z.number().int().nonnegative().max(4096), height: positive, width: positive }).optional(),
  heads: positive.optional(),
});

/** Schema of a sidecar; every field optional, each of its type when present. */
export const sidecarSchema = z.looseObject({
  preprocessing: z
    .looseObject({
      size: z.tuple([positive, positive]).optional(),
      mean: z.array(finite).min(1).optional(),
      std: z.array(finite.refine((v) => v !== 0, 'must not be 0')).min(1).optional(),
      bgr: z.boolean().optional(),
    })
    .optional(),
  outputs: readoutSchema.optional(),
  layers: z.array(z.looseObject({ name: z.string().min(1), stage: z.string().optional() })).optional(),
  layouts: z.record(z.string().min(1), layoutDeclarationSchema).optional(),
});

/** Path of a model's sidecar. */
export function sidecarPath(modelPath: string): string {
  return modelPath.replace(/\.onnx$/i, '') + '.json';
}

/**
 * Reads the sidecar of `modelPath` when there is one; returns null otherwise.
 * @throws UsageError when the sidecar exists but is not a regular file, too large, not valid JSON, or a
 *   field is of the wrong type (the message names the field path).
 */
export function readSidecar(modelPath: string): ModelSidecar | null {
  const path = sidecarPath(modelPath);
  if (path === modelPath || !existsSync(path)) return null;
  let value: unknown;
  const text = readInputText(path, `model sidecar ${path}`, INPUT_LIMITS.json);
  try {
    value = parseJson(text);
  } catch (error) {
    throw new UsageError('E_SIDECAR', `model sidecar ${path} is not valid JSON (${(error as Error).message})`);
  }
  if (typeof value !== 'object' || value === null || Array.isArray(value)) throw new UsageError('E_SIDECAR', `model sidecar ${path} must be a JSON object`);
  const problem = schemaProblem(sidecarSchema, value);
  if (problem) throw new UsageError('E_SIDECAR', `model sidecar ${path}: ${problem}`, { hint: 'fix the field or remove the sidecar' });
  return value as ModelSidecar;
}
