/**
 * The standard normal distribution: its quantile function (probit) and its distribution function.
 * Both are our own double-precision implementations of published rational approximations; the
 * product does not depend on a statistics package for them.
 */

// Wichura (1988), Algorithm AS 241 "The percentage points of the normal distribution", Applied
// Statistics 37:477–484, function PPND16 (accurate to about 1 part in 10^16). Coefficients are the
// paper's; region boundaries: |p − 0.5| ≤ 0.425 (central), r = sqrt(−ln min(p, 1−p)) ≤ 5 (intermediate),
// beyond (far tail, down to p ≈ 1e-300 and below).
const SPLIT1 = 0.425;
const SPLIT2 = 5;
const CONST1 = 0.180625;
const CONST2 = 1.6;

const A0 = 3.387132872796366608;
const A1 = 133.14166789178437745;
const A2 = 1971.5909503065514427;
const A3 = 13731.693765509461125;
const A4 = 45921.953931549871457;
const A5 = 67265.770927008700853;
const A6 = 33430.575583588128105;
const A7 = 2509.0809287301226727;
const B1 = 42.313330701600911252;
const B2 = 687.1870074920579083;
const B3 = 5394.1960214247511077;
const B4 = 21213.794301586595867;
const B5 = 39307.89580009271061;
const B6 = 28729.085735721942674;
const B7 = 5226.495278852854561;

const C0 = 1.42343711074968357734;
const C1 = 4.6303378461565452959;
const C2 = 5.7694972214606914055;
const C3 = 3.64784832476320460504;
const C4 = 1.27045825245236838258;
const C5 = 0.24178072517745061177;
const C6 = 0.0227238449892691845833;
const C7 = 7.7454501427834140764e-4;
const D1 = 2.05319162663775882187;
const D2 = 1.6763848301838038494;
const D3 = 0.68976733498510000455;
const D4 = 0.14810397642748007459;
const D5 = 0.0151986665636164571966;
const D6 = 5.475938084995344946e-4;
const D7 = 1.05075007164441684324e-9;

const E0 = 6.6579046435011037772;
const E1 = 5.4637849111641143699;
const E2 = 1.7848265399172913358;
const E3 = 0.29656057182850489123;
const E4 = 0.026532189526576123093;
const E5 = 0.0012426609473880784386;
const E6 = 2.71155556874348757815e-5;
const E7 = 2.01033439929228813265e-7;
const F1 = 0.59983220655588793769;
const F2 = 0.13692988092273580531;
const F3 = 0.0148753612908506148525;
const F4 = 7.868691311456132591e-4;
const F5 = 1.8463183175100546818e-5;
const F6 = 1.4215117583164458887e-7;
const F7 = 2.04426310338993978564e-15;

/**
 * The standard normal quantile z(p) = Φ⁻¹(p), by Wichura's algorithm AS 241 (PPND16), double precision.
 *
 * @param p probability.
 * @returns z with Φ(z) = p; relative accuracy about 1e-16 over (0, 1).
 * @throws never.
 * Edge cases: p ≤ 0 → -Infinity, p ≥ 1 → +Infinity (the limits; callers that must not see infinities
 * correct their rates first, see `detectionStats`), NaN → NaN.
 */
export function normalQuantile(p: number): number {
  if (Number.isNaN(p)) return Number.NaN;
  if (p <= 0) return Number.NEGATIVE_INFINITY;
  if (p >= 1) return Number.POSITIVE_INFINITY;
  const q = p - 0.5;
  if (Math.abs(q) <= SPLIT1) {
    const r = CONST1 - q * q;
    return (
      (q * (((((((A7 * r + A6) * r + A5) * r + A4) * r + A3) * r + A2) * r + A1) * r + A0)) /
      (((((((B7 * r + B6) * r + B5) * r + B4) * r + B3) * r + B2) * r + B1) * r + 1)
    );
  }
  // Tail: work with the smaller of p and 1 − p (1 − p is exact here because p > 0.5 + 0.425).
  let r = q < 0 ? p : 1 - p;
  r = Math.sqrt(-Math.log(r));
  let value: number;
  if (r <= SPLIT2) {
    r -= CONST2;
    value =
      (((((((C7 * r + C6) * r + C5) * r + C4) * r + C3) * r + C2) * r + C1) * r + C0) /
      (((((((D7 * r + D6) * r + D5) * r + D4) * r + D3) * r + D2) * r + D1) * r + 1);
  } else {
    r -= SPLIT2;
    value =
      (((((((E7 * r + E6) * r + E5) * r + E4) * r + E3) * r + E2) * r + E1) * r + E0) /
      (((((((F7 * r + F6) * r + F5) * r + F4) * r + F3) * r + F2) * r + F1) * r + 1);
  }
  return q < 0 ? -value : value;
}

// Cody (1993), "Algorithm 715: SPECFUN", ACM Transactions on Mathematical Software 19:22–32, function
// ANORM: rational Chebyshev approximations to Φ in three intervals (|x| ≤ 0.66291, ≤ √32, beyond), with
// relative accuracy near 1e-16 including the far lower tail. Coefficients are the published ones.
const ANORM_A = [2.2352520354606839287, 161.02823106855587881, 1067.6894854603709582, 18154.981253343561249, 0.065682337918207449113];
const ANORM_B = [47.20258190468824187, 976.09855173777669322, 10260.932208618978205, 45507.789335026729956];
const ANORM_C = [
  0.39894151208813466764, 8.8831497943883759412, 93.506656132177855979, 597.27027639480026226, 2494.5375852903726711,
  6848.1904505362823326, 11602.651437647350124, 9842.7148383839780218, 1.0765576773720192317e-8,
];
const ANORM_D = [
  22.266688044328115691, 235.38790178262499861, 1519.377599407554805, 6485.558298266760755, 18615.571640885098091,
  34900.952721145977266, 38912.003286093271411, 19685.429676859990727,
];
const ANORM_P = [
  0.21589853405795699, 0.1274011611602473639, 0.022235277870649807, 0.001421619193227893466, 2.9112874951168792e-5,
  0.02307344176494017303,
];
const ANORM_Q = [1.28426009614491121, 0.468238212480865118, 0.0659881378689285515, 0.00378239633202758244, 7.29751555083966205e-5];
const SQRT_1_2PI = 0.39894228040143267794;
const THRESHOLD = 0.66291;
const ROOT32 = 5.656854248;
const X_LOW = -37.519; // below: Φ underflows to 0 in double precision
const X_HIGH = 8.572; // above: Φ rounds to 1
const EPSILON = 1.11e-16;

/**
 * The standard normal distribution function Φ(x) = P(Z ≤ x), by Cody's algorithm ANORM (ACM TOMS 715).
 *
 * @param x the deviate.
 * @returns Φ(x) in [0, 1]; relative accuracy about 1e-15 for the lower tail down to x ≈ −37.5.
 * @throws never.
 * Edge cases: x ≤ −37.519 → 0 (underflow), x ≥ 8.572 → 1 (rounds to 1), ±Infinity → 0 / 1, NaN → NaN.
 * The upper tail 1 − Φ(x) for large x loses relative accuracy through the subtraction; use Φ(−x) instead.
 */
export function normalCdf(x: number): number {
  if (Number.isNaN(x)) return Number.NaN;
  const y = Math.abs(x);
  if (y <= THRESHOLD) {
    const xsq = y > EPSILON ? x * x : 0;
    let xnum = ANORM_A[4]! * xsq;
    let xden = xsq;
    for (let i = 0; i < 3; i++) {
      xnum = (xnum + ANORM_A[i]!) * xsq;
      xden = (xden + ANORM_B[i]!) * xsq;
    }
    return 0.5 + (x * (xnum + ANORM_A[3]!)) / (xden + ANORM_B[3]!);
  }
  let tail: number; // Φ(−|x|)
  if (y <= ROOT32) {
    let xnum = ANORM_C[8]! * y;
    let xden = y;
    for (let i = 0; i < 7; i++) {
      xnum = (xnum + ANORM_C[i]!) * y;
      xden = (xden + ANORM_D[i]!) * y;
    }
    tail = (xnum + ANORM_C[7]!) / (xden + ANORM_D[7]!);
    tail = scaleByDensity(y, tail);
  } else if (x >= X_LOW && x < X_HIGH) {
    const xsq = 1 / (x * x);
    let xnum = ANORM_P[5]! * xsq;
    let xden = xsq;
    for (let i = 0; i < 4; i++) {
      xnum = (xnum + ANORM_P[i]!) * xsq;
      xden = (xden + ANORM_Q[i]!) * xsq;
    }
    tail = (xsq * (xnum + ANORM_P[4]!)) / (xden + ANORM_Q[4]!);
    tail = (SQRT_1_2PI - tail) / y;
    tail = scaleByDensity(y, tail);
  } else {
    tail = 0;
  }
  return x > 0 ? 1 - tail : tail;
}

/** exp(−y²/2)·value, splitting y² so that the exponent is computed without cancellation (Cody's trick). */
function scaleByDensity(y: number, value: number): number {
  const ysq = Math.trunc(y * 16) / 16;
  const del = (y - ysq) * (y + ysq);
  return Math.exp(-ysq * ysq * 0.5) * Math.exp(-del * 0.5) * value;
}
