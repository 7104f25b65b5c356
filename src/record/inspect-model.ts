import { UsageError } from '../errors.js';
import { loadModel, type Dim, type LoadedModel } from '../graph/load-model.js';
import { defaultTensors } from '../graph/default-layers.js';
import { inferLayouts, type LayoutDeclaration } from '../graph/infer-layout.js';
import type { TensorLayout } from '../graph/layout.js';
import { readSidecar, sidecarPath } from '../graph/sidecar.js';
import { analyseGraph, weightLayerDepths, type GraphStructure } from '../graph/structure.js';
import { weightlessModel } from '../graph/weightless.js';
import { exposeTensors } from '../graph/instrument.js';
import { inferOutputShapes } from '../session/network-session.js';
import { probeTensors, type ProbedShapes, type ProbeOptions } from './probe-tensors.js';

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
  /** Feature axis and positions (src/graph/layout.ts), inferred from the graph or declared in the sidecar. */
  layout: TensorLayout;
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
  /**
   * `constant`: does not depend on the data input (Constant nodes, values computed from weights only);
   * `type`: not float32 (shapes, indices, masks); `batch-later`: the batch is on a later axis (e.g. [T, N, D]
   * inside an attention layer that runs sequence-first); `batch-merged`: the batch is merged with another
   * axis (e.g. [N·H, T, T], batch times heads): no row per stimulus; `unbatched`: no axis grows with the
   * batch (reduced over it, or computed from shapes); `batch`: the first axis is not the batch, and where
   * the batch went is not known (a model with a fixed batch size is probed once).
   */
  reason: 'constant' | 'type' | 'batch-later' | 'batch-merged' | 'unbatched' | 'batch';
  /** Full dims of the probe with the batch axis written `N` (`N·12` when merged), when the tensor has dims; absent for constants. */
  dims?: string[];
}

/** Words for `SkippedTensor.reason`. */
export const SKIP_REASONS: Record<SkippedTensor['reason'], string> = {
  constant: 'does not depend on the input',
  type: 'not float32',
  'batch-later': 'batch not on the first axis',
  'batch-merged': 'batch merged with another axis',
  unbatched: 'no batch axis',
  batch: 'first axis is not the batch',
};

/** Options of `inspectModel`. */
export interface InspectOptions {
  /** Full input shape (batch first) for models with dynamic non-batch axes, e.g. [1, 3, 224, 224]. */
  inputShape?: number[];
  /** Layout declarations (tensor name → declaration) that override the graph; by default the sidecar's `layouts` (null: none). */
  layouts?: Readonly<Record<string, LayoutDeclaration>> | null;
  /**
   * Probe every tensor by running the model, even those whose shapes the runtime's shape inference
   * fixes without a run (default false; the tests compare the two ways).
   */
  probeAll?: boolean;
}

/**
 * Loads a model and finds every recordable tensor with its per-stimulus shape: from the runtime's shape
 * inference where it fixes every dim (no run: a session over a weightless copy, created with no graph
 * optimisation), else by probing a batch of zeros with the remaining node outputs exposed (in slices of
 * about `PROBE_SESSION_BYTES`, src/record/probe-tensors.ts).
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
  // tensors that depend on the data input (nodes in topological order): the rest are constants, whatever
  // their shape — with a fixed batch of 1 a [1, C, 1, 1] constant would otherwise pass for an activation
  const dependent = new Set<string>([model.input.name]);
  for (const node of structure.nodes) {
    if (node.opType !== 'Constant' && node.inputs.some((i) => i && dependent.has(i))) for (const name of node.outputs) dependent.add(name);
  }
  // constants (small: shapes, indices, scalars) ride with the first slice; the activations are sliced by bytes
  const allOutputs = structure.nodes.flatMap((n) => n.outputs);
  const constants = allOutputs.filter((name) => !dependent.has(name));
  const elements = probeShape.reduce((a, b) => a * b, 1);
  // the probe needs shapes only: a weightless copy of the model spares the runtime the weights
  const probeModel = weightlessModel(model);
  const names = [...constants, ...allOutputs.filter((name) => dependent.has(name))];
  // what the runtime's shape inference fixes needs no run; the rest is probed
  const inferred = options.probeAll ? new Map() : await inferredShapes(model, probeModel, names, inputShape);
  const shapes: ProbedShapes = new Map();
  const scalars = scalarConstants(model);
  for (const name of names) {
    const dims = concreteDims(inferred.get(name), model, probeBatch, scalars);
    if (dims) shapes.set(name, { type: inferred.get(name)!.type, dims });
  }
  const rest = names.filter((name) => !shapes.has(name));
  if (rest.length > 0) {
    const probed = await probeWithWeightsAsFallback(model, probeModel, rest, { [model.input.name]: { data: new Float32Array(elements), dims: probeShape } }, { small: rest.filter((name) => !dependent.has(name)).length });
    for (const [name, found] of probed) shapes.set(name, found);
  }
  const declaredOutputs = new Set(model.outputs);
  const found: Array<Omit<LayerInfo, 'layout' | 'default'>> = [];
  const weightDepths = weightLayerDepths(structure);
  const skippedTensors: SkippedTensor[] = [];
  for (const node of structure.nodes) {
    for (const name of node.outputs) {
      const probed = shapes.get(name);
      const reason: SkippedTensor['reason'] | null = !dependent.has(name) ? 'constant' : !probed || probed.type !== 'float32' ? 'type' : probed.dims.length === 0 || probed.dims[0] !== probeBatch ? 'batch' : null;
      if (reason !== null || !probed) {
        skippedTensors.push({ name, op: node.opType, reason: reason ?? 'type', ...(probed && reason !== 'constant' ? { dims: probed.dims.map(String) } : {}) });
        continue;
      }
      const shape = probed.dims.slice(1);
      found.push({ name, op: node.opType, depth: found.length, weightDepth: weightDepths.get(name) ?? 0, shape, elements: shape.reduce((a, b) => a * b, 1), isOutput: declaredOutputs.has(name) });
    }
  }
  if (batchIsDynamic) await placeBatchAxes(model, probeModel, skippedTensors, probeShape, probeBatch, inferred);
  const declared = options.layouts === undefined ? readSidecar(model.path)?.layouts : options.layouts ?? undefined;
  const layouts = inferLayouts(model, structure, {
    shapes: new Map(found.map((l) => [l.name, l.shape])),
    dependent,
    probed: shapes,
    probeBatch,
    ...(declared ? { declared, declaredIn: sidecarPath(model.path) } : {}),
  });
  const candidates = found.map((l) => ({ ...l, layout: layouts.get(l.name)! }));
  const defaults = defaultTensors(structure, candidates, { dependent, batched: (n) => isBatched(n, shapes, probeBatch, model.input.name) && (n === model.input.name || shapes.get(n)?.type === 'float32'), outputs: declaredOutputs });
  const layers: LayerInfo[] = candidates.map((l) => ({ ...l, default: defaults.has(l.name) }));
  shapes.set(model.input.name, { type: 'float32', dims: probeShape });
  return { model, structure, input: { name: model.input.name, declared: model.input.dims, shape: inputShape }, layers, skipped: skippedTensors.length, skippedTensors, probed: shapes, probeBatch };
}

/**
 * One line counting the node outputs that are not recorded, by reason, e.g. for `--layers all`:
 * "skipped 1315 tensors that are not per-stimulus activations: 1042 do not depend on the input, 197 not
 * float32, 48 batch merged with another axis, 28 batch not on the first axis (`sonde layers MODEL
 * --skipped` lists them)"; up to `nameUpTo` skipped tensors are named instead. Null when none was skipped.
 * @param modelPath the model as the user named it, for the listing command.
 */
export function describeSkipped(inspection: Pick<ModelInspection, 'skippedTensors'>, modelPath = 'MODEL', nameUpTo = 3): string | null {
  const list = inspection.skippedTensors;
  if (list.length === 0) return null;
  if (list.length <= nameUpTo) return `skipped ${list.length} tensor${list.length === 1 ? ' that is not a per-stimulus activation' : 's that are not per-stimulus activations'}: ${list.map(describeSkippedTensor).join(', ')}`;
  const counts = new Map<SkippedTensor['reason'], number>();
  for (const t of list) counts.set(t.reason, (counts.get(t.reason) ?? 0) + 1);
  const order: Array<SkippedTensor['reason']> = ['constant', 'type', 'batch-merged', 'batch-later', 'unbatched', 'batch'];
  const parts = order.filter((r) => counts.has(r)).map((r) => `${counts.get(r)} ${r === 'constant' ? (counts.get(r) === 1 ? 'does' : 'do') + ' not depend on the input' : SKIP_REASONS[r]}`);
  return `skipped ${list.length} tensors that are not per-stimulus activations: ${parts.join(', ')} (\`sonde layers ${modelPath} --skipped\` lists them)`;
}

/** One skipped tensor in words: "name (Op, batch merged with another axis: [N·12, 197, 197])". */
export function describeSkippedTensor(t: SkippedTensor): string {
  return `${t.name} (${t.op}, ${SKIP_REASONS[t.reason]}${t.dims ? `: [${t.dims.join(', ')}]` : ''})`;
}

/**
 * Finds where the batch went in the input-dependent float tensors whose first axis is not the batch: a
 * second probe with one more stimulus, exposing only them; the axis whose size grows with the batch
 * holds it (size B: the batch on that axis; size B·k: merged with an axis of k). Updates `reason` and
 * writes the batch axis into `dims` as `N` or `N·k`.
 */
async function placeBatchAxes(model: LoadedModel, probeModel: LoadedModel, skipped: SkippedTensor[], probeShape: number[], probeBatch: number, inferred: InferredShapes): Promise<void> {
  const open = skipped.filter((t) => t.reason === 'batch' && t.dims !== undefined);
  if (open.length === 0) return;
  const shape = [probeBatch + 1, ...probeShape.slice(1)];
  const elements = shape.reduce((a, b) => a * b, 1);
  // what shape inference fixed is known at one more stimulus too; the rest runs a second probe
  const second: ProbedShapes = new Map();
  for (const t of open) {
    const dims = concreteDims(inferred.get(t.name), model, probeBatch + 1, new Set());
    if (dims) second.set(t.name, { type: inferred.get(t.name)!.type, dims });
  }
  const rest = open.filter((t) => !second.has(t.name));
  // sizes known from the first probe, scaled to one more stimulus
  const known = new Map(rest.map((t) => [t.name, (t.dims!.reduce((a, d) => a * Number(d), 1) * 4 * (probeBatch + 1)) / probeBatch]));
  const sizeOf = (name: string) => known.get(name);
  if (rest.length > 0) {
    const probed = await probeWithWeightsAsFallback(model, probeModel, rest.map((t) => t.name), { [model.input.name]: { data: new Float32Array(elements), dims: shape } }, { sizeOf });
    for (const [name, found] of probed) second.set(name, found);
  }
  for (const t of open) {
    const before = t.dims!.map(Number);
    const after = second.get(t.name)?.dims;
    if (!after || after.length !== before.length) continue;
    const grown = before.map((d, i) => (after[i] !== d ? i : -1)).filter((i) => i >= 0);
    if (grown.length === 0) t.reason = 'unbatched';
    if (grown.length !== 1) continue;
    const axis = grown[0]!;
    const k = before[axis]! / probeBatch;
    // the axis scales with the batch exactly: B·k at the probe, (B + 1)·k at the second
    if (!Number.isInteger(k) || after[axis] !== (probeBatch + 1) * k) continue;
    t.reason = k === 1 ? 'batch-later' : 'batch-merged';
    t.dims = t.dims!.map((d, i) => (i === axis ? (k === 1 ? 'N' : `N·${k}`) : d));
  }
}

/** Dims from the runtime's shape inference, some of them symbolic (`inferOutputShapes`). */
type InferredShapes = Map<string, { name: string; type: string; dims: Array<number | string> }>;

/** Outputs of Constant nodes whose value is a scalar (a tensor with no dims). */
function scalarConstants(model: LoadedModel): Set<string> {
  const out = new Set<string>();
  for (const node of model.proto.graph?.node ?? []) {
    if (node.opType !== 'Constant' || !node.output?.[0]) continue;
    const value = node.attribute?.find((a) => a.name === 'value')?.t;
    const floatOrInt = node.attribute?.find((a) => a.name === 'value_float' || a.name === 'value_int');
    if ((value && (value.dims ?? []).length === 0) || floatOrInt) out.add(node.output[0]);
  }
  return out;
}

/**
 * The runtime's shape inference over the weightless copy with `names` exposed (the model itself should
 * the copy be refused), the input's free non-batch dims fixed to `inputShape`. An empty map when
 * neither loads: the probe then finds every shape, and reports the failure.
 */
async function inferredShapes(model: LoadedModel, probeModel: LoadedModel, names: readonly string[], inputShape: number[]): Promise<InferredShapes> {
  const fixedDims: Record<string, number> = {};
  model.input.dims.forEach((d, i) => {
    if (i > 0 && typeof d === 'string' && d !== '?' && d !== model.input.dims[0]) fixedDims[d] = inputShape[i]!;
  });
  for (const candidate of probeModel === model ? [model] : [probeModel, model]) {
    try {
      const found = await inferOutputShapes(exposeTensors(candidate, names), model.fileName, fixedDims);
      return new Map([...found].map(([name, shape]) => [name, { name, ...shape }]));
    } catch {
      // the next candidate, or the probe
    }
  }
  return new Map();
}

/**
 * Inferred dims made concrete at a batch of `batch`: numbers stay, the input's named batch dim becomes
 * `batch`; undefined when any other dim is symbolic (inference could not fix it: the probe must run).
 * No dims at all is how the runtime reports a shape it knows nothing of, as well as a scalar's: taken
 * as a scalar only for the outputs of Constant nodes whose value has no dims (`scalars`).
 */
function concreteDims(inferred: { name: string; dims: Array<number | string> } | undefined, model: LoadedModel, batch: number, scalars: ReadonlySet<string>): number[] | undefined {
  if (!inferred) return undefined;
  if (inferred.dims.length === 0) return scalars.has(inferred.name) ? [] : undefined;
  const batchName = model.input.dims[0];
  const dims: number[] = [];
  for (const d of inferred.dims) {
    if (typeof d === 'number' && Number.isInteger(d) && d >= 0) dims.push(d);
    else if (typeof batchName === 'string' && batchName !== '?' && d === batchName) dims.push(batch);
    else return undefined;
  }
  return dims;
}

/**
 * Probes the weightless copy of the model; should the runtime refuse it or its run fail (an operator that
 * wants its weights constant, a shape computed from weight values), probes the model with its weights,
 * whose failure, if any, is the one reported.
 */
async function probeWithWeightsAsFallback(model: LoadedModel, probeModel: LoadedModel, names: readonly string[], feeds: Parameters<typeof probeTensors>[2], options: ProbeOptions): Promise<ProbedShapes> {
  if (probeModel === model) return probeTensors(model, names, feeds, model.fileName, options);
  try {
    return await probeTensors(probeModel, names, feeds, model.fileName, options);
  } catch {
    return probeTensors(model, names, feeds, model.fileName, options);
  }
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
