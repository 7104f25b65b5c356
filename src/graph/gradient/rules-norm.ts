/**
 * Gradient rules of normalisations: BatchNormalization in inference mode (a per-channel affine map,
 * ∂y/∂x = scale / √(var + ε)) and LayerNormalization (opset 17), whose gradient with respect to x is
 * (1/σ)·(ĝ − mean(ĝ) − x̂·mean(ĝ·x̂)) with ĝ = g·scale and x̂ = (x − μ)/σ over the normalised axes
 * (the standard layer-norm backward; e.g. Ba, Kiros & Hinton 2016, from memory). The decomposed form
 * (ReduceMean, Sub, Pow, Add, Sqrt, Div, Mul, Add) is covered by the elementwise and reduction rules.
 */
import { readAttribute } from './emit.js';
import { gradOut, knownDims, unbroadcast, type GradientRule } from './rule.js';

const batchNormalization: GradientRule = (ctx) => {
  if (readAttribute(ctx.node, 'training_mode', 0) === 1) ctx.unsupported('training mode');
  if (ctx.wants.slice(1).some(Boolean)) ctx.unsupported('its parameters depend on the site');
  const e = ctx.e;
  const [x, scale, , , variance] = ctx.inputs as [string, string, string, string, string];
  const dims = knownDims(ctx, x);
  const epsilon = readAttribute(ctx.node, 'epsilon', 1e-5);
  const factor = e.emit('Div', [scale, e.emit('Sqrt', [e.emit('Add', [variance, e.scalar(epsilon)])])]);
  const perChannel = e.emit('Reshape', [factor, e.ints([dims[1]!, ...new Array<number>(Math.max(0, dims.length - 2)).fill(1)])]);
  return [e.emit('Mul', [gradOut(ctx), perChannel]), null, null, null, null];
};

const layerNormalization: GradientRule = (ctx) => {
  if (ctx.wants.slice(1).some(Boolean)) ctx.unsupported('its scale or bias depends on the site');
  const e = ctx.e;
  const [x, scale] = ctx.inputs as [string, string];
  const dims = knownDims(ctx, x);
  let axis = readAttribute(ctx.node, 'axis', -1);
  if (axis < 0) axis += dims.length;
  if (axis === 0) ctx.unsupported('it normalises over the batch axis');
  const axes = Array.from({ length: dims.length - axis }, (_, i) => axis + i);
  const epsilon = readAttribute(ctx.node, 'epsilon', 1e-5);
  const mean = e.reduceMean(x, axes, true);
  const centred = e.emit('Sub', [x, mean]);
  const variance = e.reduceMean(e.emit('Mul', [centred, centred]), axes, true);
  const inverse = e.emit('Reciprocal', [e.emit('Sqrt', [e.emit('Add', [variance, e.scalar(epsilon)])])]);
  const normalised = e.emit('Mul', [centred, inverse]);
  const gHat = e.emit('Mul', [gradOut(ctx), scale]);
  const inner = e.emit('Sub', [e.emit('Sub', [gHat, e.reduceMean(gHat, axes, true)]), e.emit('Mul', [normalised, e.reduceMean(e.emit('Mul', [gHat, normalised]), axes, true)])]);
  return [unbroadcast(ctx, e.emit('Mul', [inverse, inner]), knownDims(ctx, ctx.outputs[0]!), x), null, null];
};

/** Rules by operator type. */
export const NORM_RULES: Record<string, GradientRule> = {
  BatchNormalization: batchNormalization,
  LayerNormalization: layerNormalization,
};
