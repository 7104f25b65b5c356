import { UsageError } from '../errors.js';
import { loadModel, type Dim, type LoadedModel } from '../graph/load-model.js';
import { exposeTensors } from '../graph/instrument.js';
import { ACTIVATION_OPS, LINEAR_OPS, MERGE_OPS, POOLING_OPS } from '../graph/select.js';
import { analyseGraph, weightLayerDepths, type GraphStructure } from '../graph/structure.js';
import { probeOutputs } from '../session/network-session.js';

/** A tensor Sonde can record: a float32 node output whose first axis is the batch. */
export interface LayerInfo {
  /** ONNX tensor name. */
  name: string;
  /** Operator type of the producing node. */
  op: string;
  /** Position among recordable tensors in topological order, 0-based. */
  depth: number;
  /** Weight layers on the longest path from the input to this tensor (`weightLayerDepths`, src/graph/structure.ts). */
  weightDepth: number;
  /** Per-stimulus shape (batch axis dropped), from the probe run. */
  shape: number[];
  /** Elements per stimulus (product of `shape`). */
  elements: number;
  /** Whether the default selector records it. */
  default: boolean;
  /** Whether it is a declared graph output of the model. */
  isOutput: boolean;
}

/** The result of `inspectModel`. */
export interface ModelInspection {
  model: LoadedModel;
  structure: GraphStructure;
  /** The data input with its concrete per-run shape (batch axis included, as probed). */
  input: { name: string; declared: Dim[]; shape: number[] };
  /** Every recordable tensor, in topological order. */
  layers: LayerInfo[];
  /** Node outputs that are not recordable (non-float, or without a batch axis). */
  skipped: number;
  /** Those node outputs, in topological order, each with the reason (for listings and notices). */
  skippedTensors: SkippedTensor[];
  /**
   * Element type and full dims (batch axis at `probeBatch`) of every node output and of the data input
   * from the probe run: what the gradient builder (src/graph/gradient/) needs to know about shapes.
   */
  probed: Map<string, { type: string; dims: number[] }>;
  /** The batch size of the probe run (2 when the batch axis is free). */
  probeBatch: number;
}

/** A node output that is not a per-stimulus activation. */
export interface SkippedTensor {
  name: string;
  op: string;
  /** `constant`: does not depend on the data input (Constant nodes, values computed from weights only); `type`: not float32; `batch`: its first axis is not the batch. */
  reason: 'constant' | 'type' | 'batch';
}

/** Words for `SkippedTensor.reason`. */
export const SKIP_REASONS: Record<SkippedTensor['reason'], string> = {
  constant: 'does not depend on the input',
  type: 'not float32',
  batch: 'first axis is not the batch',
};

/** Options of `inspectModel`. */
export interface InspectOptions {
  /** Full input shape (batch first) for models with dynamic non-batch axes, e.g. [1, 3, 224, 224]. */
  inputShape?: number[];
}

/**
 * Loads a model and finds every recordable tensor with its per-stimulus shape, by one probe run on a
 * batch of zeros with every node output exposed.
 * @throws UsageError when the input has dynamic non-batch axes and no `inputShape` is given, or when
 *   `inputShape` does not fit the declared input.
 */
export async function inspectModel(modelOrPath: string | LoadedModel, options: InspectOptions = {}): Promise<ModelInspection> {
  const model = typeof modelOrPath === 'string' ? loadModel(modelOrPath) : modelOrPath;
  const structure = analyseGraph(model);
  const inputShape = resolveInputShape(model, options.inputShape);
  // A batch of 2 (when the batch axis is free) tells batched tensors from constants of leading size 1.
  const batchIsDynamic = typeof model.input.dims[0] !== 'number';
  const probeBatch = batchIsDynamic ? 2 : inputShape[0]!;
  const probeShape = [probeBatch, ...inputShape.slice(1)];
  const allOutputs = structure.nodes.flatMap((n) => n.outputs);
  const bytes = exposeTensors(model, allOutputs);
  const elements = probeShape.reduce((a, b) => a * b, 1);
  const shapes = await probeOutputs(bytes, { [model.input.name]: { data: new Float32Array(elements), dims: probeShape } }, model.fileName);
  const declaredOutputs = new Set(model.outputs);
  const layers: LayerInfo[] = [];
  const weightDepths = weightLayerDepths(structure);
  const skippedTensors: SkippedTensor[] = [];
  // tensors that depend on the data input (nodes in topological order): the rest are constants, whatever
  // their shape — with a fixed batch of 1 a [1, C, 1, 1] constant would otherwise pass for an activation
  const dependent = new Set<string>([model.input.name]);
  for (const node of structure.nodes) {
    if (node.opType !== 'Constant' && node.inputs.some((i) => i && dependent.has(i))) for (const name of node.outputs) dependent.add(name);
  }
  for (const node of structure.nodes) {
    for (const name of node.outputs) {
      const probed = shapes.get(name);
      const reason: SkippedTensor['reason'] | null = !dependent.has(name) ? 'constant' : !probed || probed.type !== 'float32' ? 'type' : probed.dims.length === 0 || probed.dims[0] !== probeBatch ? 'batch' : null;
      if (reason !== null || !probed) {
        skippedTensors.push({ name, op: node.opType, reason: reason ?? 'type' });
        continue;
      }
      const shape = probed.dims.slice(1);
      const batchedInputs = node.inputs.filter((i) => i && dependent.has(i) && isBatched(i, shapes, probeBatch, model.input.name));
      const isMerge = MERGE_OPS.has(node.opType) && batchedInputs.length >= 2;
      const isDefault = ACTIVATION_OPS.has(node.opType) || POOLING_OPS.has(node.opType) || LINEAR_OPS.has(node.opType) || isMerge || declaredOutputs.has(name);
      layers.push({
        name,
        op: node.opType,
        depth: layers.length,
        weightDepth: weightDepths.get(name) ?? 0,
        shape,
        elements: shape.reduce((a, b) => a * b, 1),
        default: isDefault,
        isOutput: declaredOutputs.has(name),
      });
    }
  }
  shapes.set(model.input.name, { type: 'float32', dims: probeShape });
  return { model, structure, input: { name: model.input.name, declared: model.input.dims, shape: inputShape }, layers, skipped: skippedTensors.length, skippedTensors, probed: shapes, probeBatch };
}

/**
 * One line naming the node outputs that are not recorded, e.g. for `--layers all`: "skipped 2 tensors
 * that are not per-stimulus activations: scale (Constant, does not depend on the input), …" (at most
 * `limit` named), or null when none was skipped.
 */
export function describeSkipped(inspection: Pick<ModelInspection, 'skippedTensors'>, limit = 6): string | null {
  const list = inspection.skippedTensors;
  if (list.length === 0) return null;
  const named = list.slice(0, limit).map((t) => `${t.name} (${t.op}, ${SKIP_REASONS[t.reason]})`).join(', ');
  return `skipped ${list.length} tensor${list.length === 1 ? '' : 's'} that ${list.length === 1 ? 'is' : 'are'} not per-stimulus activations: ${named}${list.length > limit ? `, and ${list.length - limit} more` : ''}`;
}

function isBatched(name: string, shapes: Map<string, { type: string; dims: number[] }>, batch: number, inputName: string): boolean {
  if (name === inputName) return true;
  const probed = shapes.get(name);
  return probed !== undefined && probed.dims.length > 0 && probed.dims[0] === batch;
}

/**
 * The concrete input shape to run with (batch axis set to 1 when dynamic): the declared dims, with
 * `override` filling dynamic axes. Throws when dynamic non-batch axes are left open.
 */
export function resolveInputShape(model: LoadedModel, override: number[] | undefined): number[] {
  const declared = model.input.dims;
  if (override) {
    if (override.length !== declared.length) {
      throw new UsageError('E_INPUT_SHAPE', `--input-shape ${override.join('x')} has ${override.length} axes but input "${model.input.name}" has ${declared.length} ([${declared.join(', ')}])`);
    }
    override.forEach((d, i) => {
      if (!Number.isInteger(d) || d <= 0) throw new UsageError('E_INPUT_SHAPE', `--input-shape ${override.join('x')}: axis ${i} must be a positive integer`);
      const fixed = declared[i];
      if (i > 0 && typeof fixed === 'number' && fixed !== d) {
        throw new UsageError('E_INPUT_SHAPE', `--input-shape ${override.join('x')}: axis ${i} is fixed to ${fixed} by the model`);
      }
    });
    return assertReasonableShape(override.slice(), `--input-shape ${override.join('x')}`);
  }
  const open = declared.map((d, i) => (i > 0 && typeof d !== 'number' ? i : -1)).filter((i) => i >= 0);
  if (open.length > 0) {
    throw new UsageError('E_INPUT_SHAPE', `input "${model.input.name}" of ${model.fileName} has dynamic axes [${declared.join(', ')}]; Sonde needs a concrete shape for them`, {
      hint: `pass --input-shape, e.g. --input-shape ${declared.map((d, i) => (i === 0 ? 1 : typeof d === 'number' ? d : 224)).join('x')}`,
    });
  }
  if (declared.length === 0) throw new UsageError('E_INPUT_SHAPE', `input "${model.input.name}" of ${model.fileName} declares no shape`, { hint: 'pass --input-shape' });
  return assertReasonableShape(declared.map((d, i) => (i === 0 ? (typeof d === 'number' ? d : 1) : (d as number))), `input "${model.input.name}" of ${model.fileName}`);
}

/**
 * Largest input Sonde feeds: 2^28 elements per stimulus (1 GiB of float32) and batches of at most 2^16
 * (our limit; far above any image model, low enough that a corrupt or hostile shape is refused before
 * anything is allocated).
 */
export const MAX_INPUT_ELEMENTS = 2 ** 28;

function assertReasonableShape(shape: number[], what: string): number[] {
  const perStimulus = shape.slice(1).reduce((a, b) => a * b, 1);
  if (perStimulus > MAX_INPUT_ELEMENTS || (shape[0] ?? 1) > 2 ** 16) {
    throw new UsageError('E_INPUT_SHAPE', `${what}: shape [${shape.join(', ')}] is absurdly large (${perStimulus.toExponential(2)} values per stimulus; the limit is ${MAX_INPUT_ELEMENTS})`, {
      hint: 'check the shape; a real image input is e.g. 1x3x224x224',
    });
  }
  return shape;
}
