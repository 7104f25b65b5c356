/**
 * Site geometry for modulation: a tensor's per-stimulus shape and layout reduced to what gains need —
 * the feature count F, the positions P per feature, the 2-D grid windows and patches map onto, and the
 * dims of the injected G/B inputs. One geometry for feature maps, token tensors and vectors, so the
 * resolver and the input filler never look at the layout kind (see `layoutGeometry`, graph/layout.ts:
 * element = (o·F + f)·I + i, position p = o·I + i).
 */
import { inferTokenGrid, layoutFromShape, layoutGeometry, spatialGrid, type LayoutGeometry, type TensorLayout } from '../graph/layout.js';
import type { SiteShape } from './types.js';

/** Options of `siteShapeOf`. */
export interface SiteShapeOptions {
  /** Heads of a multi-head tensor (overrides the layout's `heads`). */
  heads?: number;
  /** The first axis of the tensor is not the batch: `shape` is the whole tensor's shape and G is shared by every stimulus. */
  shared?: boolean;
}

/**
 * The layout a site gets when none is declared: rank 2 per stimulus ([T, D]) is a token tensor with
 * features last (the patch grid inferred from T, see `inferTokenGrid`), anything else as
 * `layoutFromShape` (features on axis 0).
 */
export function defaultSiteLayout(shape: readonly number[]): TensorLayout {
  if (shape.length === 2) {
    const grid = inferTokenGrid(shape[0]!);
    return grid === null ? { kind: 'tokens', featureAxis: 1, source: 'shape' } : { kind: 'tokens', featureAxis: 1, source: 'shape', grid };
  }
  return layoutFromShape(shape);
}

/**
 * A site's geometry from its per-stimulus shape and layout.
 * @param shape Per-stimulus shape (batch dropped), or the whole shape of a shared site.
 * @param layout The declared layout; absent: `defaultSiteLayout(shape)`.
 * @returns The `SiteShape`, or null when the tensor has no feature axis (a scalar per stimulus).
 */
export function siteShapeOf(shape: readonly number[], layout?: TensorLayout | null, options: SiteShapeOptions = {}): SiteShape | null {
  const l = layout ?? defaultSiteLayout(shape);
  if (l.featureAxis === null || shape.length === 0) return null;
  const g = layoutGeometry(shape, l);
  const heads = options.heads ?? l.heads;
  return {
    shape: [...shape],
    layout: l,
    features: g.features,
    positions: g.outer * g.inner,
    grid: options.shared ? null : spatialGrid(shape, l),
    ...(heads !== undefined ? { heads } : {}),
    ...(options.shared ? { shared: true } : {}),
  };
}

/** The layout geometry of a site (outer, features, inner). */
export function siteGeometry(site: SiteShape): LayoutGeometry {
  return layoutGeometry(site.shape, site.layout);
}

/**
 * Dims of a site's G and B inputs for `rows` stimuli: the site's shape with every position axis set to
 * 1 (one value per feature), or the whole shape when `spatial`, behind the rows axis — `[rows, C, 1, 1]`
 * or `[rows, C, H, W]` for a map, `[rows, 1, D]` or `[rows, T, D]` for tokens, `[rows, C]` for a vector.
 * A shared site's inputs are the site's rank with 1 everywhere but the feature axis (no rows axis).
 */
export function gainInputDims(site: SiteShape, rows: number, spatial: boolean): number[] {
  const axis = site.layout.featureAxis ?? 0;
  const dims = site.shape.map((size, a) => (spatial || a === axis ? size : 1));
  return site.shared ? dims : [rows, ...dims];
}
