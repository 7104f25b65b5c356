import { existsSync, readFileSync } from 'node:fs';
import { UsageError } from '../errors.js';
import { parseJson } from '../json.js';

/** Optional JSON beside a model (`net.onnx` → `net.json`) that says how to feed and read it. */
export interface ModelSidecar {
  /** Preprocessing the network was trained with; used as defaults for `record`. */
  preprocessing?: { size?: [number, number]; mean?: number[]; std?: number[]; bgr?: boolean };
  /** The readout: output tensor name and the category of each of its units, in order. */
  outputs?: { name: string; kinds: string[]; threshold?: number };
  /** Tensors worth recording, with a short stage label. */
  layers?: Array<{ name: string; stage?: string }>;
}

/** Path of a model's sidecar. */
export function sidecarPath(modelPath: string): string {
  return modelPath.replace(/\.onnx$/i, '') + '.json';
}

/**
 * Reads the sidecar of `modelPath` when there is one; returns null otherwise.
 * @throws UsageError when the sidecar exists but is not valid JSON of the expected form.
 */
export function readSidecar(modelPath: string): ModelSidecar | null {
  const path = sidecarPath(modelPath);
  if (path === modelPath || !existsSync(path)) return null;
  let value: unknown;
  try {
    value = parseJson(readFileSync(path, 'utf8'));
  } catch (error) {
    throw new UsageError('E_SIDECAR', `model sidecar ${path} is not valid JSON (${(error as Error).message})`);
  }
  if (typeof value !== 'object' || value === null) throw new UsageError('E_SIDECAR', `model sidecar ${path} must be a JSON object`);
  const sidecar = value as ModelSidecar;
  const prep = sidecar.preprocessing;
  if (prep) {
    for (const key of ['mean', 'std'] as const) {
      const list = prep[key];
      if (list !== undefined && (!Array.isArray(list) || !list.every((v) => typeof v === 'number' && Number.isFinite(v)))) {
        throw new UsageError('E_SIDECAR', `model sidecar ${path}: preprocessing.${key} must be a list of numbers`);
      }
    }
  }
  if (sidecar.outputs && (typeof sidecar.outputs.name !== 'string' || !Array.isArray(sidecar.outputs.kinds))) {
    throw new UsageError('E_SIDECAR', `model sidecar ${path}: outputs must be {"name": ..., "kinds": [...]}`);
  }
  return sidecar;
}
