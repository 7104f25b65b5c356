/**
 * Gradient rules of elementwise operators with numpy broadcasting (Add, Sub, Mul, Div, Sum, Neg, Pow,
 * Sqrt, Exp, Log, Reciprocal, Where, Expand) and of the operators that pass values through unchanged
 * (Identity, inference Dropout, a float-to-float Cast). Derivatives are the textbook ones; a broadcast
 * input gets the gradient summed over the axes it was broadcast along (`unbroadcast`).
 */
import { gradOut, knownDims, unbroadcast, type GradientRule, type RuleContext } from './rule.js';

function outDims(ctx: RuleContext): number[] {
  return knownDims(ctx, ctx.outputs[0]!);
}

const passThrough: GradientRule = (ctx) => ctx.inputs.map((_, i) => (i === 0 && ctx.wants[0] ? gradOut(ctx) : null));

const add: GradientRule = (ctx) => {
  const g = gradOut(ctx);
  return ctx.inputs.map((input, i) => (ctx.wants[i] ? unbroadcast(ctx, g, outDims(ctx), input) : null));
};

const sub: GradientRule = (ctx) => {
  const g = gradOut(ctx);
  const d = outDims(ctx);
  return [ctx.wants[0] ? unbroadcast(ctx, g, d, ctx.inputs[0]!) : null, ctx.wants[1] ? unbroadcast(ctx, ctx.e.emit('Neg', [g]), d, ctx.inputs[1]!) : null];
};

const mul: GradientRule = (ctx) => {
  const g = gradOut(ctx);
  const d = outDims(ctx);
  const [a, b] = ctx.inputs as [string, string];
  return [ctx.wants[0] ? unbroadcast(ctx, ctx.e.emit('Mul', [g, b]), d, a) : null, ctx.wants[1] ? unbroadcast(ctx, ctx.e.emit('Mul', [g, a]), d, b) : null];
};

const div: GradientRule = (ctx) => {
  // y = a / b: ∂y/∂a = 1/b, ∂y/∂b = −y/b
  const g = gradOut(ctx);
  const d = outDims(ctx);
  const [a, b] = ctx.inputs as [string, string];
  const ga = ctx.wants[0] ? unbroadcast(ctx, ctx.e.emit('Div', [g, b]), d, a) : null;
  const gb = ctx.wants[1] ? unbroadcast(ctx, ctx.e.emit('Neg', [ctx.e.emit('Div', [ctx.e.emit('Mul', [g, ctx.outputs[0]!]), b])]), d, b) : null;
  return [ga, gb];
};

const neg: GradientRule = (ctx) => [ctx.wants[0] ? ctx.e.emit('Neg', [gradOut(ctx)]) : null];

const pow: GradientRule = (ctx) => {
  // y = x^p: ∂y/∂x = p·x^(p−1); a data-dependent exponent is not differentiated
  if (ctx.wants[1]) ctx.unsupported('its exponent depends on the site');
  const [x, p] = ctx.inputs as [string, string];
  const e = ctx.e;
  const known = ctx.constant(p);
  const slope = known && known.length === 1 ? e.emit('Mul', [e.scalar(known[0]!), e.emit('Pow', [x, e.scalar(known[0]! - 1)])]) : e.emit('Mul', [p, e.emit('Pow', [x, e.emit('Sub', [p, e.scalar(1)])])]);
  return [unbroadcast(ctx, e.emit('Mul', [gradOut(ctx), slope]), outDims(ctx), x), null];
};

const sqrt: GradientRule = (ctx) => [ctx.e.emit('Div', [gradOut(ctx), ctx.e.emit('Mul', [ctx.e.scalar(2), ctx.outputs[0]!])])];
const exp: GradientRule = (ctx) => [ctx.e.emit('Mul', [gradOut(ctx), ctx.outputs[0]!])];
const log: GradientRule = (ctx) => [ctx.e.emit('Div', [gradOut(ctx), ctx.inputs[0]!])];
const reciprocal: GradientRule = (ctx) => {
  const y = ctx.outputs[0]!;
  return [ctx.e.emit('Neg', [ctx.e.emit('Mul', [gradOut(ctx), ctx.e.emit('Mul', [y, y])])])];
};

const where: GradientRule = (ctx) => {
  const g = gradOut(ctx);
  const [cond, a, b] = ctx.inputs as [string, string, string];
  const zero = ctx.e.scalar(0);
  const d = outDims(ctx);
  return [null, ctx.wants[1] ? unbroadcast(ctx, ctx.e.emit('Where', [cond, g, zero]), d, a) : null, ctx.wants[2] ? unbroadcast(ctx, ctx.e.emit('Where', [cond, zero, g]), d, b) : null];
};

const expand: GradientRule = (ctx) => [unbroadcast(ctx, gradOut(ctx), outDims(ctx), ctx.inputs[0]!), null];

/** Rules by operator type. */
export const ELEMENTWISE_RULES: Record<string, GradientRule> = {
  Identity: passThrough,
  Dropout: passThrough,
  Cast: passThrough,
  Add: add,
  Sum: add,
  Sub: sub,
  Mul: mul,
  Div: div,
  Neg: neg,
  Pow: pow,
  Sqrt: sqrt,
  Exp: exp,
  Log: log,
  Reciprocal: reciprocal,
  Where: where,
  Expand: expand,
};
