/**
 * Gradient rules of operators that move values without changing them: Flatten, Reshape, Squeeze and
 * Unsqueeze (the gradient is reshaped back to the input's run-time shape), Transpose (the inverse
 * permutation), Concat (slices of the gradient), Split (the output gradients concatenated, zeros for an
 * output no gradient reaches), Slice with unit steps (the gradient padded with zeros back to the input),
 * Pad in constant mode (the gradient sliced), and Gather with constant, distinct indices (scattered
 * back into zeros, along any axis). Concat along axis 0 slices at run-time offsets (the batch axis's size is
 * not fixed by the probe).
 */
import { readAttribute } from './emit.js';
import { gradOut, knownDims, type GradientRule, type RuleContext } from './rule.js';

/** The largest int64 a Slice end may be (runs to the end of the axis). */
const TO_END = Number.MAX_SAFE_INTEGER;

const reshapeBack: GradientRule = (ctx) => ctx.inputs.map((input, i) => (i === 0 && ctx.wants[0] ? ctx.e.reshapeLike(gradOut(ctx), input) : null));

const transpose: GradientRule = (ctx) => {
  const rank = knownDims(ctx, ctx.inputs[0]!).length;
  const perm = readAttribute<number[]>(ctx.node, 'perm', Array.from({ length: rank }, (_, i) => rank - 1 - i));
  const inverse = new Array<number>(rank);
  perm.forEach((p, i) => (inverse[p] = i));
  return [ctx.e.emit('Transpose', [gradOut(ctx)], { perm: inverse })];
};

function normalAxis(ctx: RuleContext, axis: number, rank: number): number {
  const a = axis < 0 ? axis + rank : axis;
  if (a === 0) ctx.unsupported('it works along the batch axis');
  return a;
}

const concat: GradientRule = (ctx) => {
  const g = gradOut(ctx);
  const rank = knownDims(ctx, ctx.outputs[0]!).length;
  const raw = readAttribute(ctx.node, 'axis', 0);
  if ((raw < 0 ? raw + rank : raw) === 0) {
    // axis 0 may be the batch (whose size the probe does not fix): slice at run-time offsets
    const e = ctx.e;
    let start = e.ints([0]);
    return ctx.inputs.map((input, i) => {
      const size = e.emit('Slice', [e.emit('Shape', [input]), e.ints([0]), e.ints([1])]);
      const from = start;
      const to = e.emit('Add', [from, size]);
      start = to;
      return ctx.wants[i] ? e.emit('Slice', [g, from, to, e.ints([0])]) : null;
    });
  }
  const axis = normalAxis(ctx, raw, rank);
  let start = 0;
  return ctx.inputs.map((input, i) => {
    const size = knownDims(ctx, input)[axis]!;
    const from = start;
    start += size;
    if (!ctx.wants[i]) return null;
    return ctx.e.emit('Slice', [g, ctx.e.ints([from]), ctx.e.ints([from + size]), ctx.e.ints([axis])]);
  });
};

const split: GradientRule = (ctx) => {
  const rank = knownDims(ctx, ctx.inputs[0]!).length;
  const axis = normalAxis(ctx, readAttribute(ctx.node, 'axis', 0), rank);
  const parts = ctx.outputs.map((out, i) => ctx.gy[i] ?? ctx.e.zerosLike(out));
  return [ctx.e.emit('Concat', parts, { axis }), ...ctx.inputs.slice(1).map(() => null)];
};

const slice: GradientRule = (ctx) => {
  const e = ctx.e;
  const dims = knownDims(ctx, ctx.inputs[0]!);
  const rank = dims.length;
  let starts: number[] | null;
  let ends: number[] | null;
  let axes: number[] | null;
  let steps: number[] | null = null;
  if (e.opset >= 10) {
    const [, s, en, ax, st] = ctx.inputs;
    starts = s ? ctx.constant(s) : null;
    ends = en ? ctx.constant(en) : null;
    axes = ax ? ctx.constant(ax) : starts ? starts.map((_, i) => i) : null;
    steps = st ? ctx.constant(st) : null;
    if (!axes || (st && !steps)) ctx.unsupported('its axes or steps are not constant');
    if (steps && steps.some((v) => v !== 1)) ctx.unsupported('a step other than 1');
    if (!starts || !ends) return [runtimeSliceGradient(ctx, rank, axes!), ...ctx.inputs.slice(1).map(() => null)];
  } else {
    starts = readAttribute<number[]>(ctx.node, 'starts', []);
    ends = readAttribute<number[]>(ctx.node, 'ends', []);
    axes = readAttribute<number[]>(ctx.node, 'axes', starts.map((_, i) => i));
  }
  if (steps && steps.some((s) => s !== 1)) ctx.unsupported('a step other than 1');
  const pads = new Array<number>(2 * rank).fill(0);
  axes!.forEach((axis, i) => {
    const a = axis < 0 ? axis + rank : axis;
    const size = dims[a]!;
    const clamp = (v: number) => Math.min(size, Math.max(0, v < 0 ? v + size : v));
    const from = clamp(starts![i]!);
    const to = Math.max(from, clamp(ends![i]!));
    if (a === 0 && (from !== 0 || to !== size)) ctx.unsupported('it slices the batch axis');
    pads[a] = from;
    pads[a + rank] = size - to;
  });
  const g = gradOut(ctx);
  const gx = e.opset >= 11 ? e.emit('Pad', [g, e.ints(pads)]) : e.emit('Pad', [g], { pads });
  return [gx, ...ctx.inputs.slice(1).map(() => null)];
};

/**
 * Slice gradient when starts/ends are computed at run time (e.g. attention's chunking): the pads of the
 * zero padding are computed in the graph from the clamped starts and ends, as the runtime's Slice
 * clamps them (negative values count from the end; then clamped to [0, size]).
 */
function runtimeSliceGradient(ctx: RuleContext, rank: number, axes: readonly number[]): string {
  const e = ctx.e;
  const [x, startsName, endsName] = ctx.inputs as [string, string, string];
  const shape = e.emit('Shape', [x]);
  const zero = e.ints([0]);
  const begin: string[] = new Array<string>(rank).fill(zero);
  const end: string[] = new Array<string>(rank).fill(zero);
  axes.forEach((axis, i) => {
    const a = axis < 0 ? axis + rank : axis;
    const size = e.emit('Slice', [shape, e.ints([a]), e.ints([a + 1])]);
    const pick = (name: string): string => {
      const raw = e.emit('Slice', [name, e.ints([i]), e.ints([i + 1])]);
      const wrapped = e.emit('Where', [e.emit('Less', [raw, zero]), e.emit('Add', [raw, size]), raw]);
      return e.emit('Min', [e.emit('Max', [wrapped, zero]), size]);
    };
    const from = pick(startsName);
    const to = e.emit('Max', [pick(endsName), from]);
    begin[a] = from;
    end[a] = e.emit('Sub', [size, to]);
  });
  return e.emit('Pad', [gradOut(ctx), e.emit('Concat', [...begin, ...end], { axis: 0 })]);
}

const pad: GradientRule = (ctx) => {
  const e = ctx.e;
  const mode = readAttribute(ctx.node, 'mode', 'constant');
  if (mode !== 'constant') ctx.unsupported(`mode "${mode}"`);
  const dims = knownDims(ctx, ctx.inputs[0]!);
  const rank = dims.length;
  let pads: number[] | null = e.opset >= 11 ? (ctx.inputs[1] ? ctx.constant(ctx.inputs[1]) : null) : readAttribute<number[]>(ctx.node, 'pads', []);
  if (e.opset >= 11 && ctx.inputs[3]) ctx.unsupported('an axes input');
  if (!pads || pads.length !== 2 * rank) ctx.unsupported('its pads are not constant');
  pads = pads!.slice();
  if (pads.some((p) => p < 0)) ctx.unsupported('negative pads');
  if (pads[0] !== 0 || pads[rank] !== 0) ctx.unsupported('it pads the batch axis');
  const starts = pads.slice(0, rank);
  const ends = starts.map((s, a) => (a === 0 ? TO_END : s + dims[a]!));
  return [e.emit('Slice', [gradOut(ctx), e.ints(starts), e.ints(ends)]), ...ctx.inputs.slice(1).map(() => null)];
};

const gather: GradientRule = (ctx) => {
  const e = ctx.e;
  const [x, indicesName] = ctx.inputs as [string, string];
  const dims = knownDims(ctx, x);
  const rank = dims.length;
  // (axis 0 allowed: the indices are constants, scattered back wherever they point)
  const rawAxis = readAttribute(ctx.node, 'axis', 0);
  const axis = rawAxis < 0 ? rawAxis + rank : rawAxis;
  const indices = ctx.constant(indicesName);
  const indexDims = ctx.dims(indicesName);
  if (!indices || !indexDims || indexDims.length > 1) ctx.unsupported('its indices are not a constant scalar or list');
  const normal = indices!.map((i) => (i < 0 ? i + dims[axis]! : i));
  if (new Set(normal).size !== normal.length) ctx.unsupported('repeated indices');
  // a scalar index drops the axis: put it back, then scatter into zeros along it
  const g = indexDims!.length === 0 ? e.unsqueeze(gradOut(ctx), [axis]) : gradOut(ctx);
  const shape = new Array<number>(rank).fill(1);
  shape[axis] = normal.length;
  const where = e.emit('Expand', [e.ints(normal, shape), e.emit('Shape', [g])]);
  return [e.emit('ScatterElements', [e.zerosLike(x), where, g], { axis }), null];
};

/** Rules by operator type. */
export const SHAPE_RULES: Record<string, GradientRule> = {
  Flatten: reshapeBack,
  Reshape: reshapeBack,
  Squeeze: reshapeBack,
  Unsqueeze: reshapeBack,
  Transpose: transpose,
  Concat: concat,
  Split: split,
  Slice: slice,
  Pad: pad,
  Gather: gather,
};
