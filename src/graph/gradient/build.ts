/**
 * Reverse-mode differentiation as an ONNX-to-ONNX transformation: from the part of a network
 * downstream of a site (a tail graph, src/graph/tail.ts) it builds one graph that runs the forward part
 * and the backward pass in one session run and returns, per row, the gain and offset sensitivities of
 * every channel k of the site:
 *
 *   gain:   m_k = Σ over positions of (∂r/∂a)·a        offset: o_k = Σ over positions of ∂r/∂a
 *
 * where a is the site tensor and r = Σ_u seed_u · y_u a readout of the readout tensor y weighted by a
 * seed row fed with the batch (a one-hot seed picks one unit; any weights give a weighted sum, a group
 * or a linear head). With y = a·G + B injected at the site (src/graph/inject.ts), m_k = ∂r/∂G_k at
 * G = 1 and o_k = ∂r/∂B_k at B = 0: exactly what the finite-difference path estimates.
 *
 * Several readouts per stimulus (categories) in one run: the graph's inputs carry n stimuli and are
 * tiled `copies` times along the batch axis (row c·n + s is stimulus s with seed row c·n + s), so the
 * vector–Jacobian products of all categories run as one batch. Only the nodes that lie on a path from
 * the site to the readout are differentiated; shape computations and other branches carry no gradient.
 * Each operator's rule (rules-*.ts) writes standard ONNX operators of the model's opset, so the graph
 * runs in the plain CPU runtime. An operator without a rule is refused with one line naming it.
 */
import { UsageError } from '../../errors.js';
import type { LoadedModel } from '../load-model.js';
import { makeValueInfo, type NodeProto, type TensorProto } from '../onnx.js';
import { analyseGraph } from '../structure.js';
import { Emitter, tensorValues } from './emit.js';
import type { GradientRule, RuleContext } from './rule.js';
import { ACTIVATION_RULES } from './rules-activation.js';
import { ELEMENTWISE_RULES } from './rules-elementwise.js';
import { LINEAR_RULES } from './rules-linear.js';
import { NORM_RULES } from './rules-norm.js';
import { POOL_RULES } from './rules-pool.js';
import { SHAPE_RULES } from './rules-shape.js';

/** Every operator with a gradient rule. */
export const GRADIENT_RULES: Readonly<Record<string, GradientRule>> = { ...ELEMENTWISE_RULES, ...ACTIVATION_RULES, ...LINEAR_RULES, ...POOL_RULES, ...NORM_RULES, ...SHAPE_RULES };

/**
 * Operators whose outputs carry no gradient even when they read the site: shape and index
 * computations, comparisons, and piecewise-constant functions (derivative 0 almost everywhere, as in
 * PyTorch).
 */
const NO_GRADIENT: ReadonlySet<string> = new Set(['Shape', 'Size', 'ArgMax', 'ArgMin', 'Equal', 'Greater', 'GreaterOrEqual', 'Less', 'LessOrEqual', 'Not', 'And', 'Or', 'Xor', 'NonZero', 'ConstantOfShape', 'Range', 'Floor', 'Ceil', 'Round', 'Sign', 'IsNaN', 'IsInf', 'EyeLike', 'RandomNormalLike', 'RandomUniformLike', 'TopK']);

/** Names of the gradient graph's extra input and outputs. */
export const GRADIENT_NAMES = { seed: 'sonde.seed', gain: 'sonde.sensitivity.gain', offset: 'sonde.sensitivity.offset' } as const;

/** What `buildGradientGraph` needs. */
export interface GradientRequest {
  /** The tail graph's model: its inputs are the boundary tensors (batch axis first). */
  tail: LoadedModel;
  /** The site: one of the tail's inputs. */
  site: string;
  /** The readout tensor ([batch, units]), computed by the tail. */
  readout: string;
  /** How many seed rows per stimulus (categories); the inputs are tiled this many times. */
  copies: number;
  /**
   * Shapes and element types of the full model's tensors from one probe run (batch axis at the probe's
   * batch size), the data input included: which tensors are float, and the non-batch sizes rules need.
   */
  probed: ReadonlyMap<string, { type: string; dims: number[] }>;
  /** Names for messages: the model file. */
  modelName: string;
  /**
   * Axis of the site tensor (batch axis included) that holds features; the sensitivities are summed over
   * every other non-batch axis. Default 1 (NCHW maps, [N, C] vectors); 2 for [N, T, D] tokens.
   */
  featureAxis?: number;
}

/** The gradient graph and the names to feed and fetch. */
export interface GradientGraph {
  model: LoadedModel;
  /** The inputs to feed: the tail's boundary tensors (n stimuli each) and the seed ([copies·n, units]). */
  inputs: string[];
  seed: string;
  /** [copies·n, C] outputs: row c·n + s holds stimulus s's sensitivities for seed row c·n + s. */
  gain: string;
  offset: string;
  /** The readout tensor, also an output ([copies·n, units]; the copies repeat the first n rows). */
  readout: string;
  /** Nodes that were differentiated (their count, for messages and tests). */
  differentiated: number;
}

/**
 * Builds the gradient graph of a tail (see the file comment).
 * @throws UsageError naming the operator, its node and the site when a node between the site and the
 *   readout has no rule (or an unsupported form of one), with `--method richardson` as the way out; when
 *   the readout does not depend on the site.
 */
export function buildGradientGraph(request: GradientRequest): GradientGraph {
  const { tail, site, readout, copies, probed } = request;
  const graph = tail.proto.graph!;
  const structure = analyseGraph(tail);
  const initializerDims = new Map<string, number[]>();
  const constants = new Map<string, TensorProto>();
  for (const t of graph.initializer ?? []) {
    initializerDims.set(t.name ?? '', (t.dims ?? []).map(Number));
    constants.set(t.name ?? '', t);
  }
  for (const node of graph.node ?? []) {
    if (node.opType !== 'Constant') continue;
    const value = (node.attribute ?? []).find((a) => a.name === 'value')?.t;
    if (value && node.output?.[0]) constants.set(node.output[0], value);
  }
  const isFloat = (name: string): boolean => probed.get(name)?.type === 'float32';

  // tensors that depend on the site through differentiable operators …
  const fromSite = new Set<string>([site]);
  for (const node of structure.nodes) {
    if (NO_GRADIENT.has(node.opType) || !node.inputs.some((i) => i && fromSite.has(i))) continue;
    for (const out of node.outputs) if (isFloat(out)) fromSite.add(out);
  }
  // … and that the readout depends on
  const toReadout = new Set<string>([readout]);
  for (let i = structure.nodes.length - 1; i >= 0; i--) {
    const node = structure.nodes[i]!;
    if (node.outputs.some((o) => toReadout.has(o))) for (const input of node.inputs) if (input) toReadout.add(input);
  }
  const active = new Set([...fromSite].filter((t) => toReadout.has(t)));
  if (!active.has(readout) || !active.has(site)) {
    throw new UsageError('E_GRADIENT_PATH', `readout "${readout}" of ${request.modelName} does not depend on site "${site}" through float tensors`, { hint: 'pick a site upstream of the readout' });
  }

  const e = new Emitter(tail.opset);
  const gradients = new Map<string, string[]>([[readout, [GRADIENT_NAMES.seed]]]);
  const gradientOf = (tensor: string): string | null => {
    const list = gradients.get(tensor);
    if (!list || list.length === 0) return null;
    if (list.length === 1) return list[0]!;
    const total = e.emit('Sum', list, {}, 'sum');
    gradients.set(tensor, [total]);
    return total;
  };
  const protoByOutput = new Map<string, NodeProto>();
  for (const node of graph.node ?? []) for (const out of node.output ?? []) if (out) protoByOutput.set(out, node);
  let differentiated = 0;
  for (let i = structure.nodes.length - 1; i >= 0; i--) {
    const node = structure.nodes[i]!;
    if (!node.outputs.some((o) => active.has(o)) || NO_GRADIENT.has(node.opType)) continue;
    const wants = node.inputs.map((input) => input !== '' && active.has(input));
    if (!wants.some(Boolean)) continue;
    const gy = node.outputs.map((o) => (active.has(o) ? gradientOf(o) : null));
    if (gy.every((g) => g === null)) continue;
    const proto = protoByOutput.get(node.outputs[0]!)!;
    const unsupported = (why: string): never => {
      throw new UsageError('E_GRADIENT_OP', `--method exact: no gradient rule for ${node.opType}${why ? ` (${why})` : ''} at node "${node.name}" between site "${site}" and readout "${readout}" of ${request.modelName}`, {
        hint: 'use --method richardson (finite differences) for this site',
      });
    };
    const rule = GRADIENT_RULES[node.opType];
    if (!rule || (proto.domain && proto.domain !== 'ai.onnx')) unsupported('');
    const ctx: RuleContext = {
      node: proto,
      name: node.name,
      inputs: (proto.input ?? []).slice(),
      outputs: (proto.output ?? []).slice(),
      gy,
      wants,
      e,
      dims: (t) => probed.get(t)?.dims.slice() ?? initializerDims.get(t)?.slice() ?? null,
      constant: (t) => (constants.has(t) ? tensorValues(constants.get(t)!) : null),
      unsupported,
    };
    const inputGradients = rule!(ctx);
    differentiated++;
    node.inputs.forEach((input, j) => {
      const g = inputGradients[j];
      if (!g || !wants[j]) return;
      const list = gradients.get(input);
      if (list) list.push(g);
      else gradients.set(input, [g]);
    });
  }
  const siteGradient = gradientOf(site);
  if (!siteGradient) throw new UsageError('E_GRADIENT_PATH', `readout "${readout}" of ${request.modelName} does not depend on site "${site}"`, { hint: 'pick a site upstream of the readout' });

  // per-feature sums over the site's positions ([rows, C, ...] → [rows, C]; tokens [rows, T, D] → [rows, D])
  const siteRank = probed.get(site)?.dims.length ?? 2;
  const featureAxis = request.featureAxis ?? 1;
  const spatial = Array.from({ length: siteRank - 1 }, (_, i) => i + 1).filter((axis) => axis !== featureAxis);
  e.emit('Identity', [e.reduceSum(e.emit('Mul', [siteGradient, site]), spatial, false)], {}, 'gain');
  e.nodes[e.nodes.length - 1]!.output = [GRADIENT_NAMES.gain];
  e.emit('Identity', [e.reduceSum(siteGradient, spatial, false)], {}, 'offset');
  e.nodes[e.nodes.length - 1]!.output = [GRADIENT_NAMES.offset];

  // the inputs, tiled `copies` times along the batch axis
  const inputs = (graph.input ?? []).map((i) => i.name ?? '');
  const tiles: NodeProto[] = copies === 1 ? [] : inputs.map((name) => ({ name: `sonde.tile:${name}`, opType: 'Concat', domain: '', input: new Array<string>(copies).fill(`${name}::once`), output: [name], attribute: [{ name: 'axis', type: 2, i: 0 }] }));
  const declared = (graph.input ?? []).map((i) => (copies === 1 ? i : { ...i, name: `${i.name}::once` }));
  const units = probed.get(readout)?.dims[1];
  const newGraph = Object.assign(Object.create(Object.getPrototypeOf(graph)), graph, {
    node: [...tiles, ...(graph.node ?? []), ...e.nodes],
    initializer: [...(graph.initializer ?? []), ...e.initializers],
    input: [...declared, makeValueInfo(GRADIENT_NAMES.seed, 1, ['rows', units ?? 'units'])],
    output: [makeValueInfo(GRADIENT_NAMES.gain, 1), makeValueInfo(GRADIENT_NAMES.offset, 1), makeValueInfo(readout, 1)],
    valueInfo: [],
  });
  const proto = Object.assign(Object.create(Object.getPrototypeOf(tail.proto)), tail.proto, { graph: newGraph });
  return {
    model: { ...tail, proto, outputs: [GRADIENT_NAMES.gain, GRADIENT_NAMES.offset, readout] },
    inputs: [...inputs.map((n) => (copies === 1 ? n : `${n}::once`)), GRADIENT_NAMES.seed],
    seed: GRADIENT_NAMES.seed,
    gain: GRADIENT_NAMES.gain,
    offset: GRADIENT_NAMES.offset,
    readout,
    differentiated,
  };
}
