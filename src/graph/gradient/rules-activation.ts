/**
 * Gradient rules of activation functions: Relu, LeakyRelu, Clip (ReLU6), Sigmoid, HardSigmoid,
 * HardSwish, Tanh, Erf (GELU's building block), Softmax and LogSoftmax. At a kink the derivative
 * follows PyTorch's autograd (torch 1.13 `threshold_backward`, `hardtanh_backward`,
 * `hardsigmoid_backward`, `hardswish_backward`, from memory): ReLU′(0) = 0; LeakyReLU′(0) = slope;
 * Clip passes the gradient only strictly inside (min, max), so ReLU6′(0) = ReLU6′(6) = 0; HardSigmoid
 * only strictly inside its ramp; HardSwish′(−3) = 0 and HardSwish′(3) = 1.5.
 */
import { readAttribute } from './emit.js';
import { gradOut, knownDims, type GradientRule, type RuleContext } from './rule.js';

const relu: GradientRule = (ctx) => {
  const x = ctx.inputs[0]!;
  return [ctx.e.emit('Where', [ctx.e.emit('Greater', [x, ctx.e.scalar(0)]), gradOut(ctx), ctx.e.scalar(0)])];
};

const leakyRelu: GradientRule = (ctx) => {
  const x = ctx.inputs[0]!;
  const alpha = readAttribute(ctx.node, 'alpha', 0.01);
  const g = gradOut(ctx);
  return [ctx.e.emit('Where', [ctx.e.emit('Greater', [x, ctx.e.scalar(0)]), g, ctx.e.emit('Mul', [g, ctx.e.scalar(alpha)])])];
};

const clip: GradientRule = (ctx) => {
  const e = ctx.e;
  const x = ctx.inputs[0]!;
  let min: string | null = null;
  let max: string | null = null;
  if (e.opset >= 11) {
    if (ctx.wants[1] || ctx.wants[2]) ctx.unsupported('its bounds depend on the site');
    min = ctx.inputs[1] ? ctx.inputs[1] : null;
    max = ctx.inputs[2] ? ctx.inputs[2] : null;
  } else {
    const lo = readAttribute(ctx.node, 'min', Number.NEGATIVE_INFINITY);
    const hi = readAttribute(ctx.node, 'max', Number.POSITIVE_INFINITY);
    min = Number.isFinite(lo) ? e.scalar(lo) : null;
    max = Number.isFinite(hi) ? e.scalar(hi) : null;
  }
  const above = min ? e.emit('Greater', [x, min]) : null;
  const below = max ? e.emit('Less', [x, max]) : null;
  const inside = above && below ? e.emit('And', [above, below]) : (above ?? below);
  const g = gradOut(ctx);
  return [inside ? e.emit('Where', [inside, g, e.scalar(0)]) : g, null, null];
};

const sigmoid: GradientRule = (ctx) => {
  const y = ctx.outputs[0]!;
  const e = ctx.e;
  return [e.emit('Mul', [gradOut(ctx), e.emit('Mul', [y, e.emit('Sub', [e.scalar(1), y])])])];
};

const tanh: GradientRule = (ctx) => {
  const y = ctx.outputs[0]!;
  const e = ctx.e;
  return [e.emit('Mul', [gradOut(ctx), e.emit('Sub', [e.scalar(1), e.emit('Mul', [y, y])])])];
};

const hardSigmoid: GradientRule = (ctx) => {
  const e = ctx.e;
  const alpha = readAttribute(ctx.node, 'alpha', 0.2);
  const beta = readAttribute(ctx.node, 'beta', 0.5);
  const z = e.emit('Add', [e.emit('Mul', [ctx.inputs[0]!, e.scalar(alpha)]), e.scalar(beta)]);
  const inside = e.emit('And', [e.emit('Greater', [z, e.scalar(0)]), e.emit('Less', [z, e.scalar(1)])]);
  return [e.emit('Where', [inside, e.emit('Mul', [gradOut(ctx), e.scalar(alpha)]), e.scalar(0)])];
};

const hardSwish: GradientRule = (ctx) => {
  // y = x·max(0, min(1, x/6 + 1/2)): 0 below −3, x/3 + 1/2 on [−3, 3], 1 above 3
  const e = ctx.e;
  const x = ctx.inputs[0]!;
  const g = gradOut(ctx);
  const ramp = e.emit('Mul', [g, e.emit('Add', [e.emit('Div', [x, e.scalar(3)]), e.scalar(0.5)])]);
  const upper = e.emit('Where', [e.emit('Greater', [x, e.scalar(3)]), g, ramp]);
  return [e.emit('Where', [e.emit('Less', [x, e.scalar(-3)]), e.scalar(0), upper])];
};

const erf: GradientRule = (ctx) => {
  const e = ctx.e;
  const x = ctx.inputs[0]!;
  const slope = e.emit('Mul', [e.scalar(2 / Math.sqrt(Math.PI)), e.emit('Exp', [e.emit('Neg', [e.emit('Mul', [x, x])])])]);
  return [e.emit('Mul', [gradOut(ctx), slope])];
};

/** The axes a Softmax normalises over: one axis from opset 13, all from `axis` on before. */
function softmaxAxes(ctx: RuleContext): number[] {
  const rank = knownDims(ctx, ctx.outputs[0]!).length;
  const legacy = ctx.e.opset < 13;
  let axis = readAttribute(ctx.node, 'axis', legacy ? 1 : -1);
  if (axis < 0) axis += rank;
  if (axis === 0) ctx.unsupported('it normalises over the batch axis');
  return legacy ? Array.from({ length: rank - axis }, (_, i) => axis + i) : [axis];
}

const softmax: GradientRule = (ctx) => {
  // y = softmax(x): ∂L/∂x = y·(g − Σ g·y)
  const e = ctx.e;
  const y = ctx.outputs[0]!;
  const g = gradOut(ctx);
  const inner = e.reduceSum(e.emit('Mul', [g, y]), softmaxAxes(ctx), true);
  return [e.emit('Mul', [y, e.emit('Sub', [g, inner])])];
};

const logSoftmax: GradientRule = (ctx) => {
  // y = log softmax(x): ∂L/∂x = g − exp(y)·Σ g
  const e = ctx.e;
  const g = gradOut(ctx);
  const total = e.reduceSum(g, softmaxAxes(ctx), true);
  return [e.emit('Sub', [g, e.emit('Mul', [e.emit('Exp', [ctx.outputs[0]!]), total])])];
};

/** Rules by operator type. */
export const ACTIVATION_RULES: Record<string, GradientRule> = {
  Relu: relu,
  LeakyRelu: leakyRelu,
  Clip: clip,
  Sigmoid: sigmoid,
  Tanh: tanh,
  HardSigmoid: hardSigmoid,
  HardSwish: hardSwish,
  Erf: erf,
  Softmax: softmax,
  LogSoftmax: logSoftmax,
};
