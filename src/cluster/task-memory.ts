/**
 * How much memory to ask the scheduler for per task. A task holds the model (protobuf bytes, the
 * runtime's copy of the weights, the instrumented copy with every recorded tensor exposed), the
 * activations of one runtime call (every node output of `rows` stimuli, float32) plus the copies made
 * while they are written to Arrow, and the fixed cost of Node.js and the runtime. The estimate adds
 * these and a quarter on top, rounded up to 256 MiB; it is an estimate from the model's inspected
 * sizes, not a measurement of the task, so `cluster plan --mem` overrides it.
 */

/** Fixed cost of a Node.js process with onnxruntime and Arrow loaded, MiB (an allowance, with room). */
export const PROCESS_BASE_MIB = 512;

/** What the estimate is made from. */
export interface TaskMemoryInputs {
  /** Bytes of the ONNX model with its external weights (0 when the task loads no model). */
  modelBytes: number;
  /** Float32 elements per stimulus summed over every recordable tensor of the model. */
  elementsPerStimulus: number;
  /** Stimuli (or stimulus × vector rows) in one runtime call. */
  rows: number;
}

/**
 * The memory request of one task, in MiB.
 * @returns PROCESS_BASE_MIB + 3·model + 3·rows·elements·4 bytes, times 1.25, rounded up to 256 MiB.
 * @throws RangeError for negative or non-finite inputs.
 */
export function estimateTaskMemoryMib(inputs: TaskMemoryInputs): number {
  for (const [name, value] of Object.entries(inputs)) {
    if (!Number.isFinite(value) || value < 0) throw new RangeError(`estimateTaskMemoryMib: ${name} must be a finite non-negative number, got ${value}`);
  }
  const mib = 1024 * 1024;
  // model: protobuf bytes, runtime weights, instrumented copy; activations: runtime outputs, Arrow copy, arena
  const bytes = PROCESS_BASE_MIB * mib + 3 * inputs.modelBytes + 3 * inputs.rows * inputs.elementsPerStimulus * 4;
  return Math.ceil((1.25 * bytes) / mib / 256) * 256;
}

/**
 * Parses a memory request: `auto`, or a number with unit K, M, G or T (binary, as Slurm reads them;
 * no unit means M).
 * @returns MiB, or null for `auto`.
 * @throws nothing; returns undefined for text that is not a memory size.
 */
export function parseMemoryMib(text: string): number | null | undefined {
  if (text.trim() === 'auto') return null;
  const match = /^\s*(\d+(?:\.\d+)?)\s*([KMGT]?)i?B?\s*$/i.exec(text);
  if (!match) return undefined;
  const scale: Record<string, number> = { K: 1 / 1024, M: 1, G: 1024, T: 1024 * 1024, '': 1 };
  const mib = Math.ceil(Number(match[1]) * scale[match[2]!.toUpperCase()]!);
  return mib >= 1 ? mib : undefined;
}
