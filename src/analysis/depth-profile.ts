/**
 * How an effect grows or decays with depth below the injection site: a least-squares fit of
 * ln(value) = intercept + rate·depth, i.e. value ≈ e^intercept · e^(rate·depth). A negative rate is decay
 * with half-depth ln 2 / |rate| layers; a positive rate is growth with doubling depth ln 2 / rate
 * (../shared/DOMAIN.md, "Depth profile").
 */

import { UsageError } from '../errors.js';
import { linearFit } from '../stats/correlation.js';

/** One layer's effect at its depth below the site. */
export interface DepthPoint {
  /** Layers below the site (0 = the site itself); any finite number. */
  depth: number;
  /** The effect, e.g. relative change; must be > 0 (and above the floor) to enter the log fit. */
  value: number;
}

/** Options of `fitDepthProfile`. */
export interface DepthProfileOptions {
  /** Values ≤ floor (e.g. the noise floor of the metric) are excluded and counted; default: none (only ≤ 0). */
  floor?: number;
}

/** The exponential depth profile. */
export interface DepthProfile {
  /** d ln(value) / d depth, per layer (negative: decay). NaN when fewer than 2 distinct depths were usable. */
  rate: number;
  /** ln of the fitted value at depth 0. */
  intercept: number;
  /** ln 2 / |rate| for rate < 0, else null. */
  halfDepth: number | null;
  /** ln 2 / rate for rate > 0, else null. */
  doublingDepth: number | null;
  /** Coefficient of determination r² of the log-linear fit (NaN when undefined, e.g. all logs equal). */
  r2: number;
  /** Points in the fit. */
  used: number;
  /** Points left out: value ≤ 0, value ≤ floor, or a non-finite depth or value. */
  excluded: number;
}

/**
 * Fits an exponential profile to effect values over depth.
 *
 * @param points depth/value pairs, in any order.
 * @param options floor (optional).
 * @returns rate, intercept, halfDepth or doublingDepth, r², used and excluded counts.
 * @throws UsageError when the floor is NaN.
 * Edge cases: points with value ≤ 0, value ≤ floor, or non-finite depth/value are excluded and counted
 * (a log needs a positive value; below the floor the value is noise); with fewer than 2 usable points or
 * a single distinct depth the rate is NaN and both depths null; rate exactly 0 gives both null.
 */
export function fitDepthProfile(points: readonly DepthPoint[], options: DepthProfileOptions = {}): DepthProfile {
  const floor = options.floor ?? Number.NEGATIVE_INFINITY;
  if (Number.isNaN(floor)) {
    throw new UsageError('E_DEPTH_FLOOR', 'depth profile floor is NaN', { hint: 'pass a number or leave it out' });
  }
  const depths: number[] = [];
  const logs: number[] = [];
  let excluded = 0;
  for (const { depth, value } of points) {
    if (!Number.isFinite(depth) || !Number.isFinite(value) || value <= 0 || value <= floor) {
      excluded++;
      continue;
    }
    depths.push(depth);
    logs.push(Math.log(value));
  }
  const fit = linearFit(depths, logs);
  const rate = fit.slope;
  return {
    rate,
    intercept: fit.intercept,
    halfDepth: rate < 0 ? Math.LN2 / -rate : null,
    doublingDepth: rate > 0 ? Math.LN2 / rate : null,
    r2: fit.r * fit.r,
    used: depths.length,
    excluded,
  };
}

/** Below this fitted change over the whole stretch (|rate| · layers, in ln units ≈ relative) a profile is flat. */
export const FLAT_PROFILE_CHANGE = 0.05;

/**
 * The trend a fitted profile shows over `span` layers below the site: `flat` when |rate| · span is
 * under FLAT_PROFILE_CHANGE (the change keeps its size within about 5 %), else `halves` or `doubles`;
 * `unfit` when the rate is not finite (too few layers to fit).
 */
export function depthTrend(rate: number, span: number): 'flat' | 'halves' | 'doubles' | 'unfit' {
  if (!Number.isFinite(rate)) return 'unfit';
  if (Math.abs(rate) * Math.max(1, span) < FLAT_PROFILE_CHANGE) return 'flat';
  return rate < 0 ? 'halves' : 'doubles';
}
