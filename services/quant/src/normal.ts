// Standard normal density and distribution function, to double precision on the whole real line.
//
// The distribution function follows W. J. Cody, "Rational Chebyshev approximation for the error
// function", Math. Comp. 23 (1969) 631-637, in the normal-CDF form Cody later published as ANORM
// in "Algorithm 715: SPECFUN", ACM TOMS 19 (1993) 22-32: three rational approximations on
// |x| <= 0.67448975, |x| <= sqrt(32) and beyond, each with maximal relative error below 1e-17.
// The coefficients below are Cody's.
//
// Cody's own code evaluates exp(-x^2/2) as exp(-a^2/2) * exp(-(x-a)(x+a)/2) with a = x rounded
// down to 1/16, because x*x is rounded and exp() multiplies that rounding error by x^2. We get the
// same protection with a single exp: x^2 is split exactly into hi + lo (Veltkamp/Dekker), exp() is
// applied to -hi/2 (exact, since halving is exact) and the tiny lo is applied to first order. The
// batch pricer shares this Gaussian between the density and the CDF, so d1 costs one exp in all.

/* eslint-disable no-loss-of-precision -- Cody's coefficients are kept digit for digit as published;
   each rounds to the nearest double, which is what he intended. */
const SQRT_2PI_INV = 0.3989422804014327; // 1/sqrt(2 pi)
const VELTKAMP = 134217729; // 2^27 + 1: splits a double into two 26-bit halves
// Past |x| = 40 the lower tail is below the smallest subnormal (N(-38.5) ~ 5e-324).
const TAIL_CUTOFF = 40;

// Cody: 0 <= |x| <= 0.67448975, N(x) = 1/2 + x * A(x^2) / B(x^2)
const A0 = 2.2352520354606839287;
const A1 = 161.02823106855587881;
const A2 = 1067.6894854603709582;
const A3 = 18154.981253343561249;
const A4 = 0.065682337918207449113;
const B0 = 47.20258190468824187;
const B1 = 976.09855173777669322;
const B2 = 10260.932208618978205;
const B3 = 45507.789335026729956;

// Cody: 0.67448975 < |x| <= sqrt(32), N(-|x|) = exp(-x^2/2) * C(|x|) / D(|x|)
const C0 = 0.39894151208813466764;
const C1 = 8.8831497943883759412;
const C2 = 93.506656132177855979;
const C3 = 597.27027639480026226;
const C4 = 2494.5375852903726711;
const C5 = 6848.1904505362823326;
const C6 = 11602.651437647350124;
const C7 = 9842.7148383839780218;
const C8 = 1.0765576773720192317e-8;
const D0 = 22.266688044328115691;
const D1 = 235.38790178262499861;
const D2 = 1519.377599407554805;
const D3 = 6485.558298266760755;
const D4 = 18615.571640885098091;
const D5 = 34900.952721145977266;
const D6 = 38912.003286093271411;
const D7 = 19685.429676859990727;

// Cody: |x| > sqrt(32), N(-|x|) = exp(-x^2/2) / |x| * (1/sqrt(2 pi) - z P(z) / Q(z)), z = 1/x^2
const P0 = 0.21589853405795699;
const P1 = 0.1274011611602473639;
const P2 = 0.022235277870649807;
const P3 = 0.001421619193227893466;
const P4 = 2.9112874951168792e-5;
const P5 = 0.02307344176494017303;
const Q0 = 1.28426009614491121;
const Q1 = 0.468238212480865118;
const Q2 = 0.0659881378689285515;
const Q3 = 0.00378239633202758244;
const Q4 = 7.29751555083966205e-5;

const CENTRAL = 0.67448975;
const SQRT32 = 5.656854249492380195206754896838;
/* eslint-enable no-loss-of-precision */

/** exp(-x^2/2) with the rounding of x^2 compensated (see the header). 0 for |x| > 40. */
export function gaussian(x: number): number {
  const ax = x < 0 ? -x : x;
  if (ax > TAIL_CUTOFF) return 0;
  const c = VELTKAMP * ax;
  const xh = c - (c - ax);
  const xl = ax - xh;
  const hi = ax * ax;
  const lo = xh * xh - hi + 2 * xh * xl + xl * xl;
  return Math.exp(-0.5 * hi) * (1 - 0.5 * lo);
}

/** Standard normal density. */
export function normPdf(x: number): number {
  return SQRT_2PI_INV * gaussian(x);
}

/**
 * N(x) given g = gaussian(x) computed by the caller (the pricer already has it for the density).
 * Exported for the batch kernel; prefer normCdf elsewhere.
 */
export function normCdfWithGaussian(x: number, g: number): number {
  // Cody's polynomials have positive coefficients and are evaluated at positive arguments, so
  // Estrin's scheme (pairs, then pairs of pairs) is as accurate as Horner's rule; it cuts the chain
  // of dependent multiply-adds from 8 to 4, which is what this function's latency is made of.
  // The body is kept small enough for V8 to inline it into the pricing loop; the far tail, rare
  // in pricing, lives in its own function.
  const ax = x < 0 ? -x : x;
  if (ax <= CENTRAL) {
    const z = x * x;
    const z2 = z * z;
    // A(z) = A3 + A2 z + A1 z^2 + A0 z^3 + A4 z^4; B(z) = B3 + B2 z + B1 z^2 + B0 z^3 + z^4
    const num = A3 + A2 * z + z2 * (A1 + A0 * z + A4 * z2);
    const den = B3 + B2 * z + z2 * (B1 + B0 * z + z2);
    return 0.5 + (x * num) / den;
  }
  let tail: number; // N(-|x|)
  if (ax <= SQRT32) {
    const y2 = ax * ax;
    const y4 = y2 * y2;
    // C(y) = C7 + C6 y + C5 y^2 + ... + C0 y^7 + C8 y^8; D(y) = D7 + D6 y + ... + D0 y^7 + y^8
    const num = C7 + C6 * ax + y2 * (C5 + C4 * ax) + y4 * (C3 + C2 * ax + y2 * (C1 + C0 * ax) + y4 * C8);
    const den = D7 + D6 * ax + y2 * (D5 + D4 * ax) + y4 * (D3 + D2 * ax + y2 * (D1 + D0 * ax) + y4);
    tail = (g * num) / den;
  } else {
    tail = farTail(ax, g);
  }
  return x > 0 ? 1 - tail : tail;
}

/** N(-ax) for ax > sqrt(32) (0 past 40, NaN for NaN), given g = exp(-ax^2/2). */
function farTail(ax: number, g: number): number {
  const z = 1 / (ax * ax);
  const z2 = z * z;
  const z4 = z2 * z2;
  // z P(z) = P4 z + P3 z^2 + P2 z^3 + P1 z^4 + P0 z^5 + P5 z^6 (Cody's form, times z)
  // Q(z) = Q4 + Q3 z + Q2 z^2 + Q1 z^3 + Q0 z^4 + z^5
  const num = z * (P4 + P3 * z + z2 * (P2 + P1 * z) + z4 * (P0 + P5 * z));
  const den = Q4 + Q3 * z + z2 * (Q2 + Q1 * z) + z4 * (Q0 + z);
  // One exit, no early constant returns: inlined into the pricer, those made TurboFan box the
  // result. A NaN ax comes out NaN from the arithmetic.
  const t = (g * (SQRT_2PI_INV - num / den)) / ax;
  return ax > TAIL_CUTOFF ? 0 : t;
}

/** Standard normal distribution function N(x) = P(Z <= x). */
export function normCdf(x: number): number {
  return normCdfWithGaussian(x, gaussian(x));
}
