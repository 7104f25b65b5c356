/**
 * Gradient rules of pooling and reductions: MaxPool (overlapping windows, pads, ceil mode; the gradient
 * goes to the first maximum of each window, in row-major order, as PyTorch's `max_pool2d_with_indices`
 * backward does), AveragePool (count_include_pad either way), GlobalAveragePool, ReduceMean, ReduceSum.
 *
 * MaxPool without a scatter operator (ScatterElements' `add` reduction needs opset 16): the forward is
 * repeated with its Indices output; each index is turned into its offset j inside its window
 * (j = row·kw + column), the output gradient is spread into kh·kw channels per input channel (channel
 * c·kh·kw + j holds the gradient of the windows whose maximum sits at offset j), and one grouped
 * ConvTranspose with one-hot kernels puts every value back on its input position, summing where
 * windows overlap.
 */
import { readAttribute } from './emit.js';
import { gradOut, knownDims, type GradientRule, type RuleContext } from './rule.js';
import { transposeGeometry, windowPads } from './rules-linear.js';

interface Window {
  inDims: number[];
  outDims: number[];
  kernel: number[];
  strides: number[];
  pads: number[];
}

function poolWindow(ctx: RuleContext): Window {
  const x = ctx.inputs[0]!;
  const inDims = knownDims(ctx, x);
  const outDims = knownDims(ctx, ctx.outputs[0]!);
  const s = inDims.length - 2;
  const kernel = readAttribute<number[]>(ctx.node, 'kernel_shape', []);
  if (kernel.length !== s) ctx.unsupported('kernel_shape does not match the input');
  const strides = readAttribute<number[]>(ctx.node, 'strides', new Array<number>(s).fill(1));
  const dilations = readAttribute<number[]>(ctx.node, 'dilations', new Array<number>(s).fill(1));
  if (dilations.some((d) => d !== 1)) ctx.unsupported('dilated pooling');
  const pads = windowPads(ctx, inDims.slice(2), outDims.slice(2), kernel, strides, dilations);
  return { inDims, outDims, kernel, strides, pads };
}

const maxPool: GradientRule = (ctx) => {
  const e = ctx.e;
  const x = ctx.inputs[0]!;
  const w = poolWindow(ctx);
  if (w.inDims.length !== 4) ctx.unsupported('only 2-D max pooling has a rule');
  if (readAttribute(ctx.node, 'storage_order', 0) !== 0) ctx.unsupported('column-major indices');
  const [, C, H, W] = w.inDims as [number, number, number, number];
  const [Ho, Wo] = w.outDims.slice(2) as [number, number];
  const [kh, kw] = w.kernel as [number, number];
  const [sh, sw] = w.strides as [number, number];
  const kk = kh * kw;
  const attributes: Record<string, number | number[]> = { kernel_shape: w.kernel, strides: w.strides, pads: w.pads, ceil_mode: readAttribute(ctx.node, 'ceil_mode', 0) };
  const [, indices] = e.emitMany('MaxPool', [x], 2, attributes, 'maxpool-indices') as [string, string];
  // indices count over the whole tensor: [0, N·C·H·W); the position inside its map is index mod H·W
  const local = e.emit('Mod', [indices, e.ints([H * W], [])]);
  const row = e.emit('Div', [local, e.ints([W], [])]);
  const column = e.emit('Mod', [local, e.ints([W], [])]);
  const rowStart = e.ints(Array.from({ length: Ho }, (_, o) => o * sh - w.pads[0]!), [1, 1, Ho, 1]);
  const columnStart = e.ints(Array.from({ length: Wo }, (_, o) => o * sw - w.pads[1]!), [1, 1, 1, Wo]);
  const offset = e.emit('Add', [e.emit('Mul', [e.emit('Sub', [row, rowStart]), e.ints([kw], [])]), e.emit('Sub', [column, columnStart])]);
  // [N, C, 1, Ho, Wo] == [1, 1, kk, 1, 1] → [N, C, kk, Ho, Wo]
  const oneHot = e.toFloat(e.emit('Equal', [e.unsqueeze(offset, [2]), e.ints(Array.from({ length: kk }, (_, j) => j), [1, 1, kk, 1, 1])]));
  const spread = e.emit('Mul', [e.unsqueeze(gradOut(ctx), [2]), oneHot]);
  const channels = e.emit('Reshape', [spread, e.ints([-1, C * kk, Ho, Wo])]);
  const kernels = new Float32Array(C * kk * kk); // [C·kk, 1, kh, kw]: i = (c·kk + j)·kk + j
  for (let c = 0; c < C; c++) for (let j = 0; j < kk; j++) kernels[(c * kk + j) * kk + j] = 1;
  const geometry = transposeGeometry([H, W], [Ho, Wo], w.kernel, w.strides, [1, 1], w.pads);
  return [e.emit('ConvTranspose', [channels, e.floats(kernels, [C * kk, 1, kh, kw])], { group: C, kernel_shape: w.kernel, strides: w.strides, pads: geometry.pads, output_padding: geometry.outputPadding })];
};

const averagePool: GradientRule = (ctx) => {
  const e = ctx.e;
  const w = poolWindow(ctx);
  const s = w.inDims.length - 2;
  const C = w.inDims[1]!;
  const inSpatial = w.inDims.slice(2);
  const outSpatial = w.outDims.slice(2);
  const ones = new Array<number>(s).fill(1);
  const overhang = outSpatial.some((o, i) => w.strides[i]! * (o - 1) + w.kernel[i]! > inSpatial[i]! + w.pads[i]! + w.pads[i + s]!);
  if (overhang) ctx.unsupported('ceil-mode windows overhang the padded input');
  const padded = w.pads.some((p) => p !== 0);
  const includePad = readAttribute(ctx.node, 'count_include_pad', 0) === 1;
  const size = w.kernel.reduce((a, b) => a * b, 1);
  let scaled: string;
  if (!padded || includePad) scaled = e.emit('Mul', [gradOut(ctx), e.scalar(1 / size)]);
  else {
    // the divisor of each window is the number of input positions it covers: a convolution of ones
    const plane = e.floats(new Float32Array(inSpatial.reduce((a, b) => a * b, 1)).fill(1), [1, 1, ...inSpatial]);
    const counts = e.emit('Conv', [plane, e.floats(new Float32Array(size).fill(1), [1, 1, ...w.kernel])], { kernel_shape: w.kernel, strides: w.strides, pads: w.pads });
    scaled = e.emit('Div', [gradOut(ctx), counts]);
  }
  const geometry = transposeGeometry(inSpatial, outSpatial, w.kernel, w.strides, ones, w.pads);
  const kernels = e.floats(new Float32Array(C * size).fill(1), [C, 1, ...w.kernel]);
  return [e.emit('ConvTranspose', [scaled, kernels], { group: C, kernel_shape: w.kernel, strides: w.strides, pads: geometry.pads, output_padding: geometry.outputPadding })];
};

const globalAveragePool: GradientRule = (ctx) => {
  const x = ctx.inputs[0]!;
  const size = knownDims(ctx, x).slice(2).reduce((a, b) => a * b, 1);
  const e = ctx.e;
  return [e.emit('Expand', [e.emit('Mul', [gradOut(ctx), e.scalar(1 / size)]), e.emit('Shape', [x])])];
};

/**
 * The axes a Reduce* node reduces over (non-negative, sorted, without repeats) and its keepdims; null when
 * the node is a no-op (no axes and noop_with_empty_axes = 1). `axesAsInput`: the opset gives the axes as
 * the second input rather than an attribute.
 */
function reducedAxes(ctx: Parameters<GradientRule>[0], rank: number, axesAsInput: boolean): { normal: number[]; keep: boolean } | null {
  let axes: number[] | null = axesAsInput ? (ctx.inputs[1] ? ctx.constant(ctx.inputs[1]) : null) : readAttribute<number[] | null>(ctx.node, 'axes', null);
  if (axesAsInput && ctx.inputs[1] && !axes) ctx.unsupported('its axes are not constant');
  if (!axes || axes.length === 0) {
    if (readAttribute(ctx.node, 'noop_with_empty_axes', 0) === 1) return null;
    axes = Array.from({ length: rank }, (_, i) => i);
  }
  const normal = [...new Set(axes.map((a) => (a < 0 ? a + rank : a)))].sort((a, b) => a - b);
  if (normal.includes(0)) ctx.unsupported('it reduces over the batch axis');
  return { normal, keep: readAttribute(ctx.node, 'keepdims', 1) === 1 };
}

function reduction(mean: boolean): GradientRule {
  return (ctx) => {
    const e = ctx.e;
    const x = ctx.inputs[0]!;
    const dims = knownDims(ctx, x);
    const reduced = reducedAxes(ctx, dims.length, ctx.node.opType === 'ReduceSum' ? e.opset >= 13 : e.opset >= 18);
    if (!reduced) return [gradOut(ctx), null];
    const { normal, keep } = reduced;
    let g = gradOut(ctx);
    if (!keep) g = e.unsqueeze(g, normal);
    if (mean) g = e.emit('Mul', [g, e.scalar(1 / normal.reduce((a, i) => a * dims[i]!, 1))]);
    return [e.emit('Expand', [g, e.emit('Shape', [x])]), null];
  };
}

/**
 * y = log Σ_axes exp(x): ∂L/∂x = g · exp(x − y), the softmax over the reduced axes (y and g broadcast
 * back along them). Used by readout maps' category scores (src/graph/category-scores.ts).
 */
const reduceLogSumExp: GradientRule = (ctx) => {
  const e = ctx.e;
  const x = ctx.inputs[0]!;
  const reduced = reducedAxes(ctx, knownDims(ctx, x).length, e.opset >= 18);
  if (!reduced) return [gradOut(ctx), null];
  const { normal, keep } = reduced;
  const g = keep ? gradOut(ctx) : e.unsqueeze(gradOut(ctx), normal);
  const y = keep ? ctx.outputs[0]! : e.unsqueeze(ctx.outputs[0]!, normal);
  return [e.emit('Mul', [g, e.emit('Exp', [e.emit('Sub', [x, y])])]), null];
};

/** Rules by operator type. */
export const POOL_RULES: Record<string, GradientRule> = {
  MaxPool: maxPool,
  AveragePool: averagePool,
  GlobalAveragePool: globalAveragePool,
  ReduceMean: reduction(true),
  ReduceSum: reduction(false),
  ReduceLogSumExp: reduceLogSumExp,
};
