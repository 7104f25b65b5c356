/**
 * Gradient rules of the weight layers, with respect to their data input only: Conv (groups, dilations,
 * pads, strides, auto_pad) by the transposed convolution with the same weights, ConvTranspose by the
 * convolution, Gemm and MatMul by products with the transposed other factor. The transposed
 * convolution's output_padding and end pads are computed from the probed shapes so that the gradient
 * has the input's exact size (a strided convolution that ignored the last rows gets zeros there).
 */
import { readAttribute } from './emit.js';
import { gradOut, knownDims, unbroadcast, type GradientRule, type RuleContext } from './rule.js';

/** Explicit begin/end pads of a convolution or pooling window (auto_pad resolved from the probed sizes). */
export function windowPads(ctx: RuleContext, inSpatial: readonly number[], outSpatial: readonly number[], kernel: readonly number[], strides: readonly number[], dilations: readonly number[]): number[] {
  const s = inSpatial.length;
  const autoPad = readAttribute(ctx.node, 'auto_pad', 'NOTSET');
  if (autoPad === 'NOTSET') {
    const pads = readAttribute<number[]>(ctx.node, 'pads', []);
    return pads.length === 2 * s ? pads : new Array<number>(2 * s).fill(0);
  }
  if (autoPad === 'VALID') return new Array<number>(2 * s).fill(0);
  const pads = new Array<number>(2 * s).fill(0);
  for (let i = 0; i < s; i++) {
    const total = Math.max(0, (outSpatial[i]! - 1) * strides[i]! + (kernel[i]! - 1) * dilations[i]! + 1 - inSpatial[i]!);
    const small = Math.floor(total / 2);
    pads[i] = autoPad === 'SAME_LOWER' ? total - small : small;
    pads[i + s] = total - pads[i]!;
  }
  return pads;
}

/**
 * Attributes of a transposed convolution/pooling that maps an [.., out] gradient back onto [.., in]:
 * the forward's begin pads, end pads enlarged where the windows overhang the input (ceil mode), and
 * output_padding where the last input rows lie beyond every window.
 */
export function transposeGeometry(inSpatial: readonly number[], outSpatial: readonly number[], kernel: readonly number[], strides: readonly number[], dilations: readonly number[], pads: readonly number[]): { pads: number[]; outputPadding: number[] } {
  const s = inSpatial.length;
  const newPads = pads.slice();
  const outputPadding = new Array<number>(s).fill(0);
  for (let i = 0; i < s; i++) {
    const reach = strides[i]! * (outSpatial[i]! - 1) + (kernel[i]! - 1) * dilations[i]! + 1 - pads[i]! - pads[i + s]!;
    if (reach > inSpatial[i]!) newPads[i + s] = pads[i + s]! + (reach - inSpatial[i]!);
    else outputPadding[i] = inSpatial[i]! - reach;
  }
  return { pads: newPads, outputPadding };
}

const conv: GradientRule = (ctx) => {
  if (ctx.wants[1] || ctx.wants[2]) ctx.unsupported('its weights depend on the site');
  const [x, w] = ctx.inputs as [string, string];
  const inDims = knownDims(ctx, x);
  const outDims = knownDims(ctx, ctx.outputs[0]!);
  const wDims = knownDims(ctx, w);
  const s = inDims.length - 2;
  const kernel = wDims.slice(2);
  const strides = readAttribute<number[]>(ctx.node, 'strides', new Array<number>(s).fill(1));
  const dilations = readAttribute<number[]>(ctx.node, 'dilations', new Array<number>(s).fill(1));
  const group = readAttribute(ctx.node, 'group', 1);
  const pads = windowPads(ctx, inDims.slice(2), outDims.slice(2), kernel, strides, dilations);
  // Stride 1: the transposed convolution is a convolution with the kernel flipped and its channel axes
  // swapped within each group, padded by d·(k − 1) − p; the runtime's convolution kernels (depthwise
  // ones especially) are much faster than its transposed convolution.
  const backPads = pads.map((p, i) => dilations[i % s]! * (kernel[i % s]! - 1) - p);
  if (strides.every((v) => v === 1) && backPads.every((p) => p >= 0)) {
    const [M, perGroup] = wDims as [number, number];
    const e = ctx.e;
    const grouped = e.emit('Reshape', [w, e.ints([group, M / group, perGroup, ...kernel])]);
    const swapped = e.emit('Transpose', [grouped], { perm: [0, 2, 1, ...kernel.map((_, i) => 3 + i)] });
    const stacked = e.emit('Reshape', [swapped, e.ints([group * perGroup, M / group, ...kernel])]);
    const spatialAxes = kernel.map((_, i) => 2 + i);
    const flipped = e.emit('Slice', [stacked, e.ints(spatialAxes.map(() => -1)), e.ints(spatialAxes.map(() => -(2 ** 53))), e.ints(spatialAxes), e.ints(spatialAxes.map(() => -1))]);
    return [e.emit('Conv', [gradOut(ctx), flipped], { dilations, group, kernel_shape: kernel, pads: backPads }), null, null];
  }
  const geometry = transposeGeometry(inDims.slice(2), outDims.slice(2), kernel, strides, dilations, pads);
  const gx = ctx.e.emit('ConvTranspose', [gradOut(ctx), w], { strides, dilations, group, kernel_shape: kernel, pads: geometry.pads, output_padding: geometry.outputPadding });
  return [gx, null, null];
};

const convTranspose: GradientRule = (ctx) => {
  if (ctx.wants[1] || ctx.wants[2]) ctx.unsupported('its weights depend on the site');
  if (readAttribute(ctx.node, 'auto_pad', 'NOTSET') !== 'NOTSET' || readAttribute<number[]>(ctx.node, 'output_shape', []).length > 0) ctx.unsupported('auto_pad or output_shape is set');
  const [x, w] = ctx.inputs as [string, string];
  const s = knownDims(ctx, x).length - 2;
  const wDims = knownDims(ctx, w);
  const strides = readAttribute<number[]>(ctx.node, 'strides', new Array<number>(s).fill(1));
  const dilations = readAttribute<number[]>(ctx.node, 'dilations', new Array<number>(s).fill(1));
  const pads = readAttribute<number[]>(ctx.node, 'pads', new Array<number>(2 * s).fill(0));
  const group = readAttribute(ctx.node, 'group', 1);
  const gx = ctx.e.emit('Conv', [gradOut(ctx), w], { strides, dilations, group, kernel_shape: wDims.slice(2), pads });
  return [gx, null, null];
};

const gemm: GradientRule = (ctx) => {
  // Y = α·A′·B′ + β·C with A′ = Aᵀ if transA, B′ = Bᵀ if transB
  const e = ctx.e;
  const [a, b, c] = ctx.inputs as [string, string, string | undefined];
  const alpha = readAttribute(ctx.node, 'alpha', 1);
  const beta = readAttribute(ctx.node, 'beta', 1);
  const transA = readAttribute(ctx.node, 'transA', 0);
  const transB = readAttribute(ctx.node, 'transB', 0);
  const g = gradOut(ctx);
  // ∂/∂A′ = α·g·B′ᵀ; ∂/∂A = its transpose when transA
  const ga = !ctx.wants[0] ? null : transA ? e.emit('Gemm', [b, g], { alpha: { float: alpha }, transA: transB ? 1 : 0, transB: 1 }) : e.emit('Gemm', [g, b], { alpha: { float: alpha }, transB: transB ? 0 : 1 });
  // ∂/∂B′ = α·A′ᵀ·g; ∂/∂B = its transpose when transB
  const gb = !ctx.wants[1] ? null : transB ? e.emit('Gemm', [g, a], { alpha: { float: alpha }, transA: 1, transB: transA ? 1 : 0 }) : e.emit('Gemm', [a, g], { alpha: { float: alpha }, transA: transA ? 0 : 1 });
  const gc = c && ctx.wants[2] ? unbroadcast(ctx, beta === 1 ? g : e.emit('Mul', [g, e.scalar(beta)]), knownDims(ctx, ctx.outputs[0]!), c) : null;
  return [ga, gb, gc];
};

function swapLast(ctx: RuleContext, tensor: string, rank: number): string {
  const perm = Array.from({ length: rank }, (_, i) => i);
  perm[rank - 2] = rank - 1;
  perm[rank - 1] = rank - 2;
  return ctx.e.emit('Transpose', [tensor], { perm });
}

const matMul: GradientRule = (ctx) => {
  const [a, b] = ctx.inputs as [string, string];
  const aDims = knownDims(ctx, a);
  const bDims = knownDims(ctx, b);
  const out = knownDims(ctx, ctx.outputs[0]!);
  if (aDims.length < 2 || bDims.length < 2) ctx.unsupported('a factor is a vector');
  const g = gradOut(ctx);
  const ga = ctx.wants[0] ? unbroadcast(ctx, ctx.e.emit('MatMul', [g, swapLast(ctx, b, bDims.length)]), [...out.slice(0, -1), aDims[aDims.length - 1]!], a) : null;
  const gb = ctx.wants[1] ? unbroadcast(ctx, ctx.e.emit('MatMul', [swapLast(ctx, a, aDims.length), g]), [...out.slice(0, -2), bDims[bDims.length - 2]!, out[out.length - 1]!], b) : null;
  return [ga, gb];
};

/** Rules by operator type. */
export const LINEAR_RULES: Record<string, GradientRule> = {
  Conv: conv,
  ConvTranspose: convTranspose,
  Gemm: gemm,
  MatMul: matMul,
};
