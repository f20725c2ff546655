// The one place where a European option under generalized Black-Scholes-Merton is valued, for
// both the batch pricer and the object API, so the two can never disagree.
//
// Formulas: the generalized BSM with cost of carry b (Merton 1973; Black 1976 with b = 0;
// Garman-Kohlhagen 1983 with b = r - rf), and the cash-or-nothing and asset-or-nothing digitals
// of Reiner and Rubinstein (1991), as collected in E. G. Haug, "The Complete Guide to Option
// Pricing Formulas" (2nd ed., 2007), sections 1.1 and 4.19. The higher-order Greeks are the
// analytic derivatives of those prices (derived in services/quant/README.md; each is checked
// against central finite differences in the tests).
//
// Cost per option: one log, three exp (discount, carry discount, one Gaussian) and a sqrt. The
// second Gaussian comes free from S* e^{(b-r)tau} n(d1) = K e^{-r tau} n(d2).

import { gaussian, normCdfWithGaussian } from './normal.ts';
import type { GreeksBatch } from './types.ts';

const INV_SQRT_2PI = 0.3989422804014327;
const PER_POINT = 0.01;
const PER_POINT_SQ = 1e-4;
const DAYS = 365;

export const PAYOFF_VANILLA = 0;
export const PAYOFF_CASH = 1;
export const PAYOFF_ASSET = 2;

/**
 * Value one option and write its price and Greeks at index i of `out`.
 * isPut: 0 call, 1 put. Inputs are taken as valid (spot, strike, vol > 0, all finite): the
 * callers validate at their edges so this loop stays branch-light.
 */
export function valueInto(
  isPut: number,
  payoff: number,
  s: number,
  k: number,
  tau: number,
  vol: number,
  r: number,
  b: number,
  cash: number,
  rhoCarry: number,
  out: GreeksBatch,
  i: number,
): void {
  const phi = isPut === 0 ? 1 : -1;
  if (!(tau > 0)) {
    // Expired: what the holder receives now; in the money is strict, so at the strike it pays nothing.
    const itm = phi * (s - k) > 0;
    out.price[i] = payoff === PAYOFF_VANILLA ? (itm ? phi * (s - k) : 0) : payoff === PAYOFF_CASH ? (itm ? cash : 0) : itm ? s : 0;
    out.delta[i] = 0;
    out.gamma[i] = 0;
    out.vega[i] = 0;
    out.theta[i] = 0;
    out.rho[i] = 0;
    out.vanna[i] = 0;
    out.volga[i] = 0;
    out.charm[i] = 0;
    return;
  }

  const sqrtT = Math.sqrt(tau);
  const vst = vol * sqrtT;
  const dfR = Math.exp(-r * tau); // e^{-r tau}
  const dfQ = Math.exp((b - r) * tau); // e^{(b-r) tau}
  const sd = s * dfQ;
  const kd = k * dfR;
  const d1 = (Math.log(s / k) + (b + 0.5 * vol * vol) * tau) / vst;
  const d2 = d1 - vst;
  // Take the Gaussian at whichever of d1, d2 is nearer 0 (it cannot underflow while the other
  // still matters) and scale it by F/K = sd/kd to get the other.
  let g1: number;
  let g2: number;
  if ((d1 < 0 ? -d1 : d1) <= (d2 < 0 ? -d2 : d2)) {
    g1 = gaussian(d1);
    g2 = g1 * (sd / kd);
  } else {
    g2 = gaussian(d2);
    g1 = g2 * (kd / sd);
  }
  const dd1dt = b / vst - d2 / (2 * tau); // d(d1)/dtau
  const dd2dt = b / vst - d1 / (2 * tau); // d(d2)/dtau

  let price: number;
  let delta: number;
  let gamma: number;
  let vega: number; // raw dV/dsigma
  let dvdt: number; // dV/dtau
  let rho: number; // raw dV/dr
  let vanna: number; // raw d2V/dS dsigma
  let volga: number; // raw d2V/dsigma2
  let ddeltadt: number; // d(delta)/dtau

  if (payoff === PAYOFF_VANILLA) {
    const n1 = INV_SQRT_2PI * g1;
    const cdf1 = normCdfWithGaussian(phi * d1, g1);
    const cdf2 = normCdfWithGaussian(phi * d2, g2);
    const p = phi * (sd * cdf1 - kd * cdf2);
    price = p > 0 ? p : 0; // rounding can leave a worthless wing a hair below zero
    delta = phi * dfQ * cdf1;
    gamma = (dfQ * n1) / (s * vst);
    vega = sd * n1 * sqrtT;
    dvdt = (sd * n1 * vol) / (2 * sqrtT) + phi * ((b - r) * sd * cdf1 + r * kd * cdf2);
    rho = rhoCarry !== 0 ? phi * tau * kd * cdf2 : -tau * price;
    vanna = (-dfQ * n1 * d2) / vol;
    volga = (vega * d1 * d2) / vol;
    ddeltadt = dfQ * (phi * (b - r) * cdf1 + n1 * dd1dt);
  } else if (payoff === PAYOFF_CASH) {
    const n2 = INV_SQRT_2PI * g2;
    const cdf2 = normCdfWithGaussian(phi * d2, g2);
    const a = cash * dfR;
    const an = phi * a * n2; // phi A e^{-r tau} n(d2)
    price = a * cdf2;
    delta = an / (s * vst);
    gamma = (-an * d1) / (s * s * vst * vst);
    vega = (-an * d1) / vol;
    dvdt = -r * price + an * dd2dt;
    rho = rhoCarry !== 0 ? -tau * price + (an * sqrtT) / vol : -tau * price;
    vanna = (an * (d1 * d2 - 1)) / (s * vol * vst);
    volga = (-an * (d1 * d1 * d2 - d1 - d2)) / (vol * vol);
    ddeltadt = delta * (-r - d2 * dd2dt - 1 / (2 * tau));
  } else {
    const n1 = INV_SQRT_2PI * g1;
    const cdf1 = normCdfWithGaussian(phi * d1, g1);
    const qn = phi * dfQ * n1; // phi e^{(b-r) tau} n(d1)
    price = sd * cdf1;
    delta = dfQ * cdf1 + qn / vst;
    gamma = (-qn * d2) / (s * vst * vst);
    vega = (-s * qn * d2) / vol;
    dvdt = (b - r) * price + s * qn * dd1dt;
    rho = rhoCarry !== 0 ? (s * qn * sqrtT) / vol : -tau * price;
    vanna = (qn * ((d1 * d2 - 1) / vst - d2)) / vol;
    volga = (-s * qn * (d1 * d2 * d2 - d1 - d2)) / (vol * vol);
    ddeltadt = (b - r) * delta - (qn * (dd1dt * d2 + 1 / (2 * tau))) / vst;
  }

  out.price[i] = price;
  out.delta[i] = delta;
  out.gamma[i] = gamma;
  out.vega[i] = vega * PER_POINT;
  out.theta[i] = -dvdt / DAYS;
  out.rho[i] = rho * PER_POINT;
  out.vanna[i] = vanna * PER_POINT;
  out.volga[i] = volga * PER_POINT_SQ;
  out.charm[i] = -ddeltadt / DAYS;
}
