/**
 * Tensor layouts: which axis of a per-stimulus activation (batch axis dropped) holds features, and which
 * axes are positions. Every recordable tensor has one; channel means, tuning, gains and windows are
 * computed along it.
 *
 * Kinds (per-stimulus shapes):
 * - `channels-first` [C, H, W] (or [C, L], [C, D, H, W]): feature axis 0, as exported from PyTorch.
 * - `channels-last` [H, W, C]: feature axis = last, as exported from TensorFlow/Keras graphs.
 * - `tokens` [T, D]: T token positions, D features on the last axis (transformer residual stream,
 *   attention output, MLP activations). `grid` says how tokens map onto the image.
 * - `heads` [H, T, T'] or [H, T, d] (or [T, H, d] with the feature axis on the heads): attention internals
 *   of a multi-head layer with the batch axis first; the heads are the features, the rest positions.
 * - `vector` [D]: one position.
 * - `scalar` []: one value per stimulus; no feature axis to tune or modulate.
 *
 * A layout reduces to a geometry: element index = (o·F + f)·I + i for outer position o < O, feature
 * f < F and inner position i < I. Channels-first has O = 1, I = H·W; tokens and channels-last have
 * O = positions, I = 1. Kernels loop over that geometry and never look at the kind.
 */

/** The kind of a tensor layout. */
export type LayoutKind = 'channels-first' | 'channels-last' | 'tokens' | 'heads' | 'vector' | 'scalar';

/** Where a layout came from. */
export type LayoutSource = 'graph' | 'sidecar' | 'shape';

/** How token positions map onto the image: `prefix` leading tokens (class, register) then a row-major height × width patch grid. */
export interface TokenGrid {
  prefix: number;
  height: number;
  width: number;
}

/** The declared layout of one tensor. */
export interface TensorLayout {
  kind: LayoutKind;
  /** Axis of the per-stimulus shape holding features; null for scalars. */
  featureAxis: number | null;
  /** `graph`: inferred from the operators that consume or produce the tensor; `sidecar`: declared by the user; `shape`: from the rank alone. */
  source: LayoutSource;
  /** Token tensors: the patch grid, when the token count is prefix + height·width for a square-ish grid. */
  grid?: TokenGrid;
  /** Multi-head tensors (attention output [T, H·d]): number of heads, when known. */
  heads?: number;
}

/** Index arithmetic of a layout: element = (o·features + f)·inner + i. */
export interface LayoutGeometry {
  outer: number;
  features: number;
  inner: number;
}

/** Positions per feature (outer · inner). */
export function positionCount(g: LayoutGeometry): number {
  return g.outer * g.inner;
}

/**
 * The layout a shape gets from its rank alone (what snapshots written before layouts existed mean):
 * features on axis 0 for rank ≥ 1, a scalar otherwise.
 */
export function layoutFromShape(shape: readonly number[]): TensorLayout {
  if (shape.length === 0) return { kind: 'scalar', featureAxis: null, source: 'shape' };
  if (shape.length === 1) return { kind: 'vector', featureAxis: 0, source: 'shape' };
  return { kind: 'channels-first', featureAxis: 0, source: 'shape' };
}

/** Geometry of `shape` under `layout` (a missing layout means `layoutFromShape`). */
export function layoutGeometry(shape: readonly number[], layout?: TensorLayout | null): LayoutGeometry {
  const axis = (layout ?? layoutFromShape(shape)).featureAxis;
  if (axis === null || shape.length === 0) return { outer: 1, features: 1, inner: shape.reduce((a, b) => a * b, 1) };
  if (axis < 0 || axis >= shape.length) throw new RangeError(`feature axis ${axis} is outside shape [${shape.join(', ')}]`);
  let outer = 1;
  let inner = 1;
  for (let a = 0; a < axis; a++) outer *= shape[a]!;
  for (let a = axis + 1; a < shape.length; a++) inner *= shape[a]!;
  return { outer, features: shape[axis]!, inner };
}

/** Number of features (channels) of `shape` under `layout`. */
export function featureCount(shape: readonly number[], layout?: TensorLayout | null): number {
  return layoutGeometry(shape, layout).features;
}

/**
 * The spatial grid of a tensor, for windows and maps: [H, W] of channels-first/last maps, the patch grid
 * of tokens (with the prefix tokens outside it), null when the tensor has no 2-D positions.
 */
export function spatialGrid(shape: readonly number[], layout?: TensorLayout | null): TokenGrid | null {
  const l = layout ?? layoutFromShape(shape);
  if (l.kind === 'channels-first' && shape.length === 3) return { prefix: 0, height: shape[1]!, width: shape[2]! };
  if (l.kind === 'channels-last' && shape.length === 3) return { prefix: 0, height: shape[0]!, width: shape[1]! };
  if (l.kind === 'tokens') return l.grid ?? null;
  return null;
}

/**
 * The patch grid of a token count: the largest prefix p ≤ 8 (checked from 0 up) such that T − p is a
 * perfect square ≥ 4, as a side × side grid; null when none fits (e.g. text-like sequences).
 */
export function inferTokenGrid(tokens: number): TokenGrid | null {
  for (let prefix = 0; prefix <= 8 && prefix < tokens; prefix++) {
    const side = Math.round(Math.sqrt(tokens - prefix));
    if (side >= 2 && side * side === tokens - prefix) return { prefix, height: side, width: side };
  }
  return null;
}

/**
 * Mean of each feature over all positions for each row: out[r·F + f] = mean over (o, i) of
 * data[r·O·F·I + (o·F + f)·I + i], summed in doubles. For a vector (O = I = 1) it is the vector itself.
 */
export function featureMeans(data: Float32Array, rows: number, g: LayoutGeometry, out: Float32Array = new Float32Array(rows * g.features)): Float32Array {
  const { outer, features, inner } = g;
  const per = outer * features * inner;
  const inverse = 1 / (outer * inner);
  const sums = new Float64Array(features);
  for (let r = 0; r < rows; r++) {
    const base = r * per;
    if (outer === 1) {
      for (let f = 0; f < features; f++) {
        const start = base + f * inner;
        let sum = 0;
        for (let i = 0; i < inner; i++) sum += data[start + i]!;
        out[r * features + f] = sum * inverse;
      }
      continue;
    }
    sums.fill(0);
    for (let o = 0; o < outer; o++) {
      const start = base + o * features * inner;
      if (inner === 1) {
        for (let f = 0; f < features; f++) sums[f]! += data[start + f]!;
      } else {
        for (let f = 0; f < features; f++) {
          let sum = 0;
          for (let i = 0; i < inner; i++) sum += data[start + f * inner + i]!;
          sums[f]! += sum;
        }
      }
    }
    for (let f = 0; f < features; f++) out[r * features + f] = sums[f]! * inverse;
  }
  return out;
}

/**
 * Reorders rows so that each feature's positions are contiguous (channels-first order), for kernels that
 * read a feature as one run: out[r·E + (f·O + o)·I + i] = data[r·E + (o·F + f)·I + i], E = O·F·I. With
 * O = 1 the order is already that and `data` is returned as it is (no copy).
 */
export function featureFirstOrder(data: Float32Array, rows: number, g: LayoutGeometry, out?: Float32Array): Float32Array {
  const { outer, features, inner } = g;
  if (outer === 1) return data;
  const per = outer * features * inner;
  const target = out ?? new Float32Array(rows * per);
  for (let r = 0; r < rows; r++) {
    const base = r * per;
    // source [o][f][i] → target [f][o][i]
    for (let o = 0; o < outer; o++) {
      for (let f = 0; f < features; f++) {
        const from = base + (o * features + f) * inner;
        const to = base + (f * outer + o) * inner;
        for (let i = 0; i < inner; i++) target[to + i] = data[from + i]!;
      }
    }
  }
  return target;
}

/** Words for a layout in listings, e.g. "tokens 197×768 (1+14×14, features last)". */
export function describeLayout(shape: readonly number[], layout?: TensorLayout | null): string {
  const l = layout ?? layoutFromShape(shape);
  const dims = shape.join('×') || 'scalar';
  switch (l.kind) {
    case 'scalar':
      return 'scalar';
    case 'vector':
      return `vector ${dims}`;
    case 'channels-first':
      return `maps ${dims} (features first)`;
    case 'channels-last':
      return `maps ${dims} (features last)`;
    case 'heads':
      return `heads ${dims} (${l.featureAxis === null ? '?' : shape[l.featureAxis]} heads on axis ${l.featureAxis})`;
    case 'tokens': {
      const grid = l.grid ? `${l.grid.prefix > 0 ? `${l.grid.prefix}+` : ''}${l.grid.height}×${l.grid.width}` : 'no grid';
      return `tokens ${dims} (${grid}${l.heads ? `, ${l.heads} heads` : ''})`;
    }
  }
}
