/**
 * Spatial profile of a change: the relative change ‖b − a‖ / ‖a‖ of a feature map within rings of
 * equal distance from a point (a window's centre), accumulated over stimuli and channels. Distances are
 * map-relative, as windows are: the centre of pixel (row i, column j) is at x = (j + 0.5)/W,
 * y = (i + 0.5)/H, and d = √((x − cx)² + (y − cy)²). Rings split [0, largest pixel distance] into equal
 * widths. Pure; sums in doubles.
 */

/** One ring of the profile. */
export interface SpatialRing {
  /** Inner and outer distance of the ring (map-relative); the last ring includes its outer edge. */
  from: number;
  to: number;
  /** Map positions in the ring (per channel and stimulus). */
  positions: number;
  /** ‖b − a‖ / ‖a‖ over the ring's values (NaN when ‖a‖ = 0 or the ring is empty). */
  relativeChange: number;
}

/** Accumulates the spatial profile of one layer over stimuli. */
export class SpatialProfileAccumulator {
  private readonly ring: Int32Array;
  private readonly diff2: Float64Array;
  private readonly base2: Float64Array;
  private readonly count: Float64Array;
  private readonly maxDistance: number;

  /**
   * @param height H of the map; @param width W; @param cx, cy the centre (map-relative);
   * @param rings number of rings (≥ 1);
   * @param outer the outer edge of the last ring (default: the largest pixel distance); pixels beyond it
   *   count in the last ring. A shared edge (the map corner farthest from the centre) gives layers of
   *   different resolution the same rings.
   */
  constructor(private readonly channels: number, private readonly height: number, private readonly width: number, cx: number, cy: number, private readonly rings = 8, outer?: number) {
    const n = height * width;
    this.ring = new Int32Array(n);
    const distance = new Float64Array(n);
    let max = 0;
    for (let i = 0; i < height; i++) {
      for (let j = 0; j < width; j++) {
        const d = Math.hypot((j + 0.5) / width - cx, (i + 0.5) / height - cy);
        distance[i * width + j] = d;
        if (d > max) max = d;
      }
    }
    if (outer !== undefined && outer > 0) max = outer;
    this.maxDistance = max;
    for (let p = 0; p < n; p++) this.ring[p] = max > 0 ? Math.min(rings - 1, Math.floor((distance[p]! / max) * rings)) : 0;
    this.diff2 = new Float64Array(rings);
    this.base2 = new Float64Array(rings);
    this.count = new Float64Array(rings);
  }

  /**
   * Adds one stimulus.
   * @param base a, [C, H, W] row-major (i = (c*H + h)*W + w); @param mod b, same layout.
   */
  add(base: ArrayLike<number>, mod: ArrayLike<number>): void {
    const plane = this.height * this.width;
    for (let c = 0; c < this.channels; c++) {
      const offset = c * plane;
      for (let p = 0; p < plane; p++) {
        const a = base[offset + p]!;
        const d = mod[offset + p]! - a;
        const r = this.ring[p]!;
        this.diff2[r] += d * d;
        this.base2[r] += a * a;
        this.count[r] += 1;
      }
    }
  }

  /** The rings, nearest first. */
  result(): SpatialRing[] {
    const out: SpatialRing[] = [];
    for (let r = 0; r < this.rings; r++) {
      const norm = Math.sqrt(this.base2[r]!);
      out.push({ from: (r / this.rings) * this.maxDistance, to: ((r + 1) / this.rings) * this.maxDistance, positions: this.count[r]!, relativeChange: this.count[r]! > 0 && norm > 0 ? Math.sqrt(this.diff2[r]!) / norm : Number.NaN });
    }
    return out;
  }
}
