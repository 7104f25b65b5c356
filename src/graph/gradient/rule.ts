/**
 * What an operator rule of the gradient builder sees and returns. A rule gets the forward node, the
 * gradient of each of its outputs (the vector–Jacobian product arriving from the readout, or null when
 * no gradient reaches that output) and which inputs need a gradient; it writes standard ONNX nodes
 * through the emitter and returns one gradient tensor name per input (null where none is wanted).
 * Rules differentiate with respect to data inputs only: weights never get a gradient.
 */
import type { NodeProto } from '../onnx.js';
import type { Emitter } from './emit.js';

/** The forward node and the builder's knowledge of shapes and constants. */
export interface RuleContext {
  node: NodeProto;
  /** The node's name (or `OpType_index`) for messages. */
  name: string;
  /** Input names ('' for an omitted optional input). */
  inputs: string[];
  /** Output names. */
  outputs: string[];
  /** Gradient of each output, or null. */
  gy: (string | null)[];
  /** Per input: whether a gradient is wanted. */
  wants: boolean[];
  e: Emitter;
  /** Probed dims of a tensor (batch axis at the probe's batch size), initializer dims, or null when unknown. */
  dims(tensor: string): number[] | null;
  /** The values of a constant tensor (initializer or Constant output), or null. */
  constant(tensor: string): number[] | null;
  /** Throws the builder's "no rule" error for an unsupported form of this operator. */
  unsupported(why: string): never;
}

/** A rule: input gradients from output gradients. */
export type GradientRule = (ctx: RuleContext) => (string | null)[];

/** Dims that must be known (the rule cannot go on without them). */
export function knownDims(ctx: RuleContext, tensor: string): number[] {
  const d = ctx.dims(tensor);
  if (!d) ctx.unsupported(`the shape of "${tensor}" is unknown`);
  return d;
}

/** The one output gradient of a single-output operator (rules are only called when it exists). */
export function gradOut(ctx: RuleContext): string {
  const g = ctx.gy[0];
  if (!g) ctx.unsupported('its first output carries no gradient');
  return g;
}

/**
 * Reduces a gradient computed at `gDims` (probed, batch at the probe size) to the shape of `input`
 * (numpy broadcasting, right-aligned): sums over the axes the input was broadcast along, then reshapes
 * to the input's run-time shape when it has fewer axes. Returns `g` unchanged when the shapes agree.
 */
export function unbroadcast(ctx: RuleContext, g: string, gDims: readonly number[], input: string): string {
  const inDims = knownDims(ctx, input);
  const pad = gDims.length - inDims.length;
  if (pad < 0) ctx.unsupported(`input "${input}" has more axes than its gradient`);
  const axes: number[] = [];
  for (let i = 0; i < gDims.length; i++) {
    if (i < pad || (inDims[i - pad] === 1 && gDims[i] !== 1)) axes.push(i);
  }
  if (axes.length === 0 && pad === 0) return g;
  const reduced = ctx.e.reduceSum(g, axes, true);
  return pad > 0 ? ctx.e.reshapeLike(reduced, input) : reduced;
}
