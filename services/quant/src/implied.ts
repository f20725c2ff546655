// Implied volatility of a European vanilla under generalized BSM.
//
// Method: safeguarded Newton-Raphson with a bisection bracket, on the logarithm of the
// out-of-the-money price.
// - An in-the-money price is first turned into the out-of-the-money price of the same strike by
//   put-call parity (C - P = S e^{(b-r)t} - K e^{-rt}), so the solver only ever sees time value.
// - Newton runs on ln(price), not on price: out of the money the price behaves like
//   exp(-c/sigma^2) and plain Newton crawls, while ln(price) is close to linear in 1/sigma^2.
// - Every iterate narrows a bracket [lo, hi] on which the price is monotone (vega > 0); a Newton
//   step that leaves the bracket is replaced by bisection, so the iteration converges for every
//   price strictly inside the no-arbitrage bounds.
// - Starting point: the inflection point of the price in sigma, sigma^2 = 2|ln(F/K)|/t, where vega
//   is largest (S. Manaster and G. Koehler, "The calculation of implied variances from the
//   Black-Scholes model: a note", J. Finance 37 (1982) 227-230), or near the money, where that
//   point collapses to 0, the Brenner-Subrahmanyam estimate sigma = sqrt(2 pi / t) C / F e^{-rt}
//   (M. Brenner and M. Subrahmanyam, "A simple formula to compute the implied standard
//   deviation", Financial Analysts Journal 44 (1988) 80-83).
//
// Digitals are not inverted: a digital's price is not monotone in vol (it rises with vol on one
// side of the forward and falls on the other), so its implied vol is not unique.

import { gaussian, normCdfWithGaussian } from './normal.ts';
import type { OptionInputs } from './types.ts';

const INV_SQRT_2PI = 0.3989422804014327;
const SQRT_2PI = 2.5066282746310002;
const MAX_ITERATIONS = 200;
// Beyond sigma sqrt(t) = 75 a vanilla is its upper bound to double precision: N(-37.5) ~ 1e-308.
const MAX_TOTAL_VOL = 75;

export type ImpliedVolInputs = Omit<OptionInputs, 'vol'> & { price: number };

export class ImpliedVolError extends Error {
  /** The open no-arbitrage interval for the price, when the failure is about bounds. */
  readonly lower: number | undefined;
  readonly upper: number | undefined;
  constructor(message: string, bounds?: { lower: number; upper: number }) {
    super(message);
    this.name = 'ImpliedVolError';
    this.lower = bounds?.lower;
    this.upper = bounds?.upper;
  }
}

function fmt(x: number): string {
  return Number.isFinite(x) ? String(Number(x.toPrecision(12))) : String(x);
}

/** The open interval (lower, upper) in which a vanilla price has an implied vol. */
export function impliedVolBounds(p: Omit<ImpliedVolInputs, 'price'>): { lower: number; upper: number } {
  const sd = p.spot * Math.exp((p.carry - p.rate) * p.tau);
  const kd = p.strike * Math.exp(-p.rate * p.tau);
  return p.right === 'call'
    ? { lower: Math.max(sd - kd, 0), upper: sd }
    : { lower: Math.max(kd - sd, 0), upper: kd };
}

function requireFinite(name: string, v: number, positive: boolean): void {
  if (typeof v !== 'number' || !Number.isFinite(v) || (positive && !(v > 0))) {
    throw new ImpliedVolError(
      `implied vol: ${name} must be a finite number${positive ? ' > 0' : ''} (got ${String(v)})`,
    );
  }
}

/** The vol at which the vanilla option's price equals p.price. Throws ImpliedVolError with the reason. */
export function impliedVol(p: ImpliedVolInputs): number {
  if (p.payoff !== 'vanilla') {
    throw new ImpliedVolError(
      `implied vol is solved for vanilla options only (payoff ${String(p.payoff)}): a digital's price is not monotone in vol, so its implied vol is not unique`,
    );
  }
  if (p.right !== 'call' && p.right !== 'put')
    throw new ImpliedVolError(`implied vol: right must be call or put (got ${String(p.right)})`);
  requireFinite('spot', p.spot, true);
  requireFinite('strike', p.strike, true);
  requireFinite('tau', p.tau, false);
  requireFinite('rate', p.rate, false);
  requireFinite('carry', p.carry, false);
  requireFinite('price', p.price, false);
  if (!(p.tau > 0))
    throw new ImpliedVolError(
      `implied vol: tau must be > 0, an expired option has no time value to invert (got ${p.tau})`,
    );

  const tau = p.tau;
  const sd = p.spot * Math.exp((p.carry - p.rate) * tau);
  const kd = p.strike * Math.exp(-p.rate * tau);
  const { lower, upper } =
    p.right === 'call'
      ? { lower: Math.max(sd - kd, 0), upper: sd }
      : { lower: Math.max(kd - sd, 0), upper: kd };
  if (!(p.price > lower && p.price < upper)) {
    throw new ImpliedVolError(
      `price ${fmt(p.price)} is outside the no-arbitrage bounds (${fmt(lower)}, ${fmt(upper)}) of this ${p.right}: no vol reproduces it`,
      { lower, upper },
    );
  }

  // Out-of-the-money side (psi = +1 call, -1 put) and its price, the time value.
  const psi = sd < kd ? 1 : -1;
  const target = p.price - lower;
  const lnTarget = Math.log(target);
  const sqrtT = Math.sqrt(tau);
  const lnFK = Math.log(sd / kd);

  let sigma = Math.sqrt((2 * Math.abs(lnFK)) / tau);
  const nearMoney = (target * SQRT_2PI) / (Math.min(sd, kd) * sqrtT);
  if (!(sigma > nearMoney)) sigma = nearMoney;
  if (!(sigma * sqrtT < MAX_TOTAL_VOL)) sigma = MAX_TOTAL_VOL / (2 * sqrtT);

  let lo = 0;
  let hi = Infinity;
  for (let it = 0; it < MAX_ITERATIONS; it++) {
    const vst = sigma * sqrtT;
    const d1 = lnFK / vst + 0.5 * vst;
    const d2 = d1 - vst;
    const g1 = gaussian(d1);
    const g2 = gaussian(d2);
    const otm = psi * (sd * normCdfWithGaussian(psi * d1, g1) - kd * normCdfWithGaussian(psi * d2, g2));
    const vega = sd * INV_SQRT_2PI * g1 * sqrtT;
    let next: number;
    if (otm > 0 && vega > 0) {
      const h = Math.log(otm) - lnTarget;
      if (h === 0) return sigma;
      if (h > 0) hi = sigma;
      else lo = sigma;
      next = sigma - (h * otm) / vega;
    } else {
      // The price underflowed at this vol: the root is above it.
      lo = sigma;
      next = NaN;
    }
    if (!(next > lo && next < hi)) next = hi === Infinity ? 2 * sigma : 0.5 * (lo + hi);
    if (next * sqrtT > MAX_TOTAL_VOL) {
      if (hi === Infinity) {
        throw new ImpliedVolError(
          `price ${fmt(p.price)} is within rounding of the upper bound ${fmt(upper)}: the implied vol would exceed ${fmt(MAX_TOTAL_VOL / sqrtT)}`,
          { lower, upper },
        );
      }
      next = 0.5 * (lo + hi);
    }
    // Newton converges quadratically, so a step of 1e-13 sigma leaves an error far below that;
    // a tighter test would chase the rounding noise of deep out-of-the-money prices.
    if (Math.abs(next - sigma) <= 1e-13 * next || (hi !== Infinity && hi - lo <= 4e-16 * hi)) return next;
    sigma = next;
  }
  throw new ImpliedVolError(
    `implied vol did not converge in ${MAX_ITERATIONS} iterations (price ${fmt(p.price)}, bracket [${fmt(lo)}, ${fmt(hi)}])`,
  );
}
