/**
 * The inputs a sweep cell depends on, and their digest. A sweep resumed into an existing `--out` reuses
 * the cells of `cells.jsonl` only when they were computed from the same inputs: the model bytes, the
 * baseline (its manifest, which holds every layer file's and stimulus's SHA-256 and the labels' digest),
 * the tuning and sensitivity tables' bytes, the task, the threshold rule and the options that change a
 * cell's values (depth profile and its stimulus count). Sites, schemes, strengths, categories and seeds
 * are part of each cell's own key; batching options (`--vectors`, `--threads`) and sharding do not change
 * a cell and are left out, so shards and reruns with other batch sizes combine.
 *
 * `cells.jsonl` carries the inputs as a header line `{"sweepInputs": DIGEST, "of": {...}}` before its
 * cells; concatenated shards carry one header each, and every header must match.
 */
import { createHash } from 'node:crypto';
import { INPUT_LIMITS, readInputFile } from '../disk/input-file.js';
import { join } from 'node:path';
import { UsageError } from '../errors.js';
import { TOOL_VERSION } from '../version.js';

/**
 * Version of what a cell holds: bump it whenever `SweepCell` gains, loses or redefines a measure, so that
 * cells written before the change are not reused as if they had it.
 */
export const SWEEP_CELL_FORMAT = 2; // 2: ROC area, matched hit rate and criterion-shift control per cell

/** What the cells of one sweep were computed from (the fields of the digest, in this order). */
export interface SweepInputs {
  /** Sonde version: a newer build may compute or store cells differently. */
  sonde: string;
  /** `SWEEP_CELL_FORMAT` of the build that wrote the cells. */
  cellFormat: number;
  /** SHA-256 of the model (its .onnx bytes and any external weight files; LoadedModel.sha256). */
  model: string;
  /** SHA-256 of the baseline's `manifest.json` bytes. */
  baseline: string;
  /** SHA-256 of the tuning table's bytes, or null without one. */
  tuning: string | null;
  /** SHA-256 of the sensitivity table's bytes, or null without one. */
  sensitivity: string | null;
  /** The task as given (trimmed), e.g. `detect:all`. */
  task: string;
  /** The decision threshold rule: a number, `best` or `auto`. */
  threshold: number | 'best' | 'auto';
  /** Stimuli the depth profile is measured on, or null without `--depth-profile`. */
  depthProfileStimuli: number | null;
}

/** Human names of the inputs, for messages. */
const INPUT_NAMES: Record<keyof SweepInputs, string> = {
  sonde: 'the Sonde version',
  cellFormat: 'the cell format (SWEEP_CELL_FORMAT)',
  model: 'the model',
  baseline: 'the baseline snapshot (--from)',
  tuning: 'the tuning table (--tuning)',
  sensitivity: 'the sensitivity table (--sensitivity)',
  task: 'the task (--task)',
  threshold: 'the threshold rule',
  depthProfileStimuli: 'the depth profile (--depth-profile)',
};

/** SHA-256 (hex) of a file's bytes; a missing file is the caller's error to report first. */
function fileSha256(path: string): string {
  return createHash('sha256').update(readInputFile(path, path, INPUT_LIMITS.table)).digest('hex');
}

/**
 * Collects the inputs of a sweep.
 * @param parts the model's SHA-256, the baseline folder, table paths and the cell-changing options.
 * @returns the inputs; table paths are read in full (their bytes are hashed).
 */
export function sweepInputsOf(parts: { modelSha256: string; baselineFolder: string; tuning?: string | undefined; sensitivity?: string | undefined; task: string; threshold: number | 'best' | 'auto'; depthProfile: boolean; profileStimuli: number }): SweepInputs {
  return {
    sonde: TOOL_VERSION,
    cellFormat: SWEEP_CELL_FORMAT,
    model: parts.modelSha256,
    baseline: fileSha256(join(parts.baselineFolder, 'manifest.json')),
    tuning: parts.tuning === undefined ? null : fileSha256(parts.tuning),
    sensitivity: parts.sensitivity === undefined ? null : fileSha256(parts.sensitivity),
    task: parts.task.trim(),
    threshold: parts.threshold,
    depthProfileStimuli: parts.depthProfile ? parts.profileStimuli : null,
  };
}

/** SHA-256 (hex) over the inputs' canonical JSON (fields in `SweepInputs` order). */
export function sweepInputsDigest(inputs: SweepInputs): string {
  const ordered = (Object.keys(INPUT_NAMES) as (keyof SweepInputs)[]).map((key) => [key, inputs[key]]);
  return createHash('sha256').update(JSON.stringify(ordered)).digest('hex');
}

/** The header line of `cells.jsonl` (with its newline). */
export function sweepInputsHeader(inputs: SweepInputs): string {
  return `${JSON.stringify({ sweepInputs: sweepInputsDigest(inputs), of: inputs })}\n`;
}

/** Whether a parsed `cells.jsonl` line is an inputs header rather than a cell. */
export function isSweepInputsHeader(line: unknown): line is { sweepInputs: string; of?: Partial<SweepInputs> } {
  return typeof line === 'object' && line !== null && typeof (line as { sweepInputs?: unknown }).sweepInputs === 'string';
}

/**
 * Refuses to reuse cells computed from other inputs.
 * @param progressPath `OUT/cells.jsonl`, for messages.
 * @param headers the inputs headers found in the file (one per concatenated shard).
 * @param cellCount cells found in the file.
 * @param wanted the inputs of this run.
 * @throws UsageError naming the first input that differs (or saying the file records none), with the
 *   fix: another `--out`, or `--restart` to discard the old cells.
 */
export function assertSameSweepInputs(progressPath: string, headers: readonly { sweepInputs: string; of?: Partial<SweepInputs> }[], cellCount: number, wanted: SweepInputs): void {
  const hint = 'write to a new --out folder, or pass --restart to discard the cells already there';
  if (headers.length === 0) {
    if (cellCount === 0) return;
    throw new UsageError('E_SWEEP_INPUTS', `${progressPath} holds ${cellCount} cells but no record of the inputs they were computed from; they cannot be reused safely`, { hint });
  }
  const digest = sweepInputsDigest(wanted);
  for (const header of headers) {
    if (header.sweepInputs === digest) continue;
    const stored = header.of ?? {};
    const differing = (Object.keys(INPUT_NAMES) as (keyof SweepInputs)[]).filter((key) => JSON.stringify(stored[key] ?? null) !== JSON.stringify(wanted[key]));
    const what = differing.length === 0 ? 'inputs whose record does not match its digest' : differing.map((key) => `${INPUT_NAMES[key]} (${describe(stored[key])} there, ${describe(wanted[key])} now)`).join('; ');
    throw new UsageError('E_SWEEP_INPUTS', `${progressPath} holds cells of a sweep with other inputs: ${what}`, { hint });
  }
}

/** A short form of one input value for messages: hashes cut to 12 digits. */
function describe(value: unknown): string {
  if (value === null || value === undefined) return 'none';
  if (typeof value === 'string' && /^[0-9a-f]{64}$/.test(value)) return `sha256 ${value.slice(0, 12)}…`;
  return JSON.stringify(value);
}

