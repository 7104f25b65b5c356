/**
 * The eight glyph kinds of the demo search displays, as inside-tests in a glyph's own unit frame:
 * the glyph is centred on (0, 0) and fits inside the circle of radius `GLYPH_EXTENT`, so a glyph of
 * radius r pixels covers at most a (2·r·GLYPH_EXTENT)² pixel box whatever its rotation.
 */

/** The glyph kinds, in the order the demo network's outputs use. */
export const DEMO_KINDS = ['disc', 'ring', 'cross', 'triangle', 'square', 'bar', 'star', 'crescent'] as const;

/** One glyph kind of the demo scenario. */
export type DemoKind = (typeof DEMO_KINDS)[number];

/** Radius, in unit-frame lengths, of a circle that holds every glyph (the bar's corners reach 1.04). */
export const GLYPH_EXTENT = 1.05;

/** A planar shape as a point test in its own unit frame: true when (u, v) lies inside. */
export type UnitShape = (u: number, v: number) => boolean;

/** Whether `name` is one of `DEMO_KINDS`. */
export function isDemoKind(name: string): name is DemoKind {
  return (DEMO_KINDS as readonly string[]).includes(name);
}

const RING_INNER = 0.55; // ring: annulus 0.55 ≤ ρ ≤ 1
const ARM_HALF_WIDTH = 0.28; // cross arms and bar: half-width relative to the radius
const SQUARE_HALF_SIDE = 0.72;
const STAR_INNER = 0.42; // star: inner vertices at 0.42 of the tip radius
const CRESCENT_BITE_OFFSET = 0.5; // crescent: unit disc minus a disc of radius 0.8 centred at (0.5, 0)
const CRESCENT_BITE_RADIUS = 0.8;

// star edge from the tip (1, 0) to the inner vertex at 36°: inside when on the origin's side of that line
const STAR_SECTOR = (2 * Math.PI) / 5;
const STAR_IX = STAR_INNER * Math.cos(STAR_SECTOR / 2);
const STAR_IY = STAR_INNER * Math.sin(STAR_SECTOR / 2);

// equilateral triangle inscribed in the unit circle, one vertex up (+v): edges at distance 0.5 from the centre,
// outward normals at 270°, 30° and 150°
const COS30 = Math.sqrt(3) / 2;

function insideDisc(u: number, v: number): boolean {
  return u * u + v * v <= 1;
}

function insideRing(u: number, v: number): boolean {
  const rho2 = u * u + v * v;
  return rho2 <= 1 && rho2 >= RING_INNER * RING_INNER;
}

function insideCross(u: number, v: number): boolean {
  const au = Math.abs(u);
  const av = Math.abs(v);
  return (au <= ARM_HALF_WIDTH && av <= 1) || (av <= ARM_HALF_WIDTH && au <= 1);
}

function insideTriangle(u: number, v: number): boolean {
  return -v <= 0.5 && COS30 * u + 0.5 * v <= 0.5 && -COS30 * u + 0.5 * v <= 0.5;
}

function insideSquare(u: number, v: number): boolean {
  return Math.abs(u) <= SQUARE_HALF_SIDE && Math.abs(v) <= SQUARE_HALF_SIDE;
}

function insideBar(u: number, v: number): boolean {
  return Math.abs(u) <= 1 && Math.abs(v) <= ARM_HALF_WIDTH;
}

function insideStar(u: number, v: number): boolean {
  const rho = Math.sqrt(u * u + v * v);
  if (rho > 1) return false;
  if (rho <= STAR_INNER) return true;
  // fold the angle into [0, 36°] by the star's 5-fold rotation and mirror symmetry
  let angle = Math.atan2(v, u);
  if (angle < 0) angle += 2 * Math.PI;
  angle %= STAR_SECTOR;
  if (angle > STAR_SECTOR / 2) angle = STAR_SECTOR - angle;
  const x = rho * Math.cos(angle);
  const y = rho * Math.sin(angle);
  // cross product sign of (inner − tip) × (point − tip): ≥ 0 on the centre's side
  return (STAR_IX - 1) * y - STAR_IY * (x - 1) >= 0;
}

function insideCrescent(u: number, v: number): boolean {
  const du = u - CRESCENT_BITE_OFFSET;
  return u * u + v * v <= 1 && du * du + v * v >= CRESCENT_BITE_RADIUS * CRESCENT_BITE_RADIUS;
}

const SHAPES: Record<DemoKind, UnitShape> = {
  disc: insideDisc,
  ring: insideRing,
  cross: insideCross,
  triangle: insideTriangle,
  square: insideSquare,
  bar: insideBar,
  star: insideStar,
  crescent: insideCrescent,
};

/** The inside-test of glyph `kind` in its unit frame (radius 1, centred, unrotated). */
export function glyphShape(kind: DemoKind): UnitShape {
  return SHAPES[kind];
}
