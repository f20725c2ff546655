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
// Cost per option: one log, three exp (discount, carry discount, one Gaussian) and a sqrt; the
// discount factors are reused while tau, r and b repeat. The second Gaussian comes free from
// S* e^{(b-r)tau} n(d1) = K e^{-r tau} n(d2).

import { normCdfWithGaussian } from './normal.ts';
import type { GreeksBatch, OptionBatch } from './types.ts';

const INV_SQRT_2PI = 0.3989422804014327;
const PER_POINT = 0.01;
const PER_POINT_SQ = 1e-4;
const PER_DAY = 1 / 365;
const VELTKAMP = 134217729; // 2^27 + 1, as in normal.ts
const GAUSS_CUTOFF = 40; // exp(-800) is 0 in double

// Scratch for valueRange, which is synchronous and so never shares it.
const MEMO = new Float64Array(11);

export const PAYOFF_VANILLA = 0;
export const PAYOFF_CASH = 1;
export const PAYOFF_ASSET = 2;

/**
 * Value options [from, to) of `batch` into the same rows of `out`. Inputs are taken as valid
 * (spot, strike, vol > 0, all finite): the callers validate at their edges. The body is one loop
 * with no calls but the math library and the CDF, so V8 keeps everything in registers.
 */
export function valueRange(batch: OptionBatch, out: GreeksBatch, from: number, to: number): void {
  const rightA = batch.right;
  const payoffA = batch.payoff;
  const spotA = batch.spot;
  const strikeA = batch.strike;
  const tauA = batch.tau;
  const volA = batch.vol;
  const rateA = batch.rate;
  const carryA = batch.carry;
  const cashA = batch.cashAmount;
  const rhoCarryA = batch.rhoCarry;
  const oPrice = out.price;
  const oDelta = out.delta;
  const oGamma = out.gamma;
  const oVega = out.vega;
  const oTheta = out.theta;
  const oRho = out.rho;
  const oVanna = out.vanna;
  const oVolga = out.volga;
  const oCharm = out.charm;
  // Options of one underlying and expiry share tau, r and b: their discount factors are computed
  // once per run of equal values (the engine revalues an underlying's options together).
  // Loop-carried doubles live in MEMO, not in locals: TurboFan kept such locals tagged and boxed
  // each update as a HeapNumber. Slots: 0-2 last tau, r, b; 3-6 sqrt(tau), 1/(2 tau), e^{-r tau},
  // e^{(b-r) tau}; 7-10 the CDF arguments (x, Gaussian) for d1 and d2, overwritten by N(x).
  const m = MEMO;
  m[0] = NaN;
  for (let i = from; i < to; i++) {
    const isPut = rightA[i]!;
    const payoff = payoffA[i]!;
    const s = spotA[i]!;
    const k = strikeA[i]!;
    const tau = tauA[i]!;
    const vol = volA[i]!;
    const r = rateA[i]!;
    const b = carryA[i]!;
    const cash = cashA[i]!;
    const rhoCarry = rhoCarryA[i]!;
    const phi = isPut === 0 ? 1 : -1;
    if (!(tau > 0)) {
      // Expired: what the holder receives now; in the money is strict, so at the strike it pays nothing.
      const itm = phi * (s - k) > 0;
      oPrice[i] =
        payoff === PAYOFF_VANILLA
          ? itm
            ? phi * (s - k)
            : 0
          : payoff === PAYOFF_CASH
            ? itm
              ? cash
              : 0
            : itm
              ? s
              : 0;
      oDelta[i] = 0;
      oGamma[i] = 0;
      oVega[i] = 0;
      oTheta[i] = 0;
      oRho[i] = 0;
      oVanna[i] = 0;
      oVolga[i] = 0;
      oCharm[i] = 0;
      continue;
    }

    if (tau !== m[0] || r !== m[1] || b !== m[2]) {
      m[0] = tau;
      m[1] = r;
      m[2] = b;
      m[3] = Math.sqrt(tau);
      m[4] = 0.5 / tau; // 1/(2 tau)
      m[5] = Math.exp(-r * tau); // e^{-r tau}
      m[6] = Math.exp((b - r) * tau); // e^{(b-r) tau}
    }
    const sqrtT = m[3]!;
    const half = m[4]!;
    const dfR = m[5]!;
    const dfQ = m[6]!;
    const vst = vol * sqrtT;
    // Reciprocals once: a division costs several multiplications and this loop needs many.
    const iVst = 1 / vst;
    const iVol = 1 / vol;
    const iS = 1 / s;
    const sd = s * dfQ;
    const kd = k * dfR;
    const d1 = (Math.log(s / k) + (b + 0.5 * vol * vol) * tau) * iVst;
    const d2 = d1 - vst;
    // Take the Gaussian at whichever of d1, d2 is nearer 0 (it cannot underflow while the other
    // still matters) and scale it by F/K = sd/kd to get the other. The Gaussian is normal.ts's
    // gaussian() written out here: V8's inlining budget for this loop goes to the two CDFs.
    const near1 = (d1 < 0 ? -d1 : d1) <= (d2 < 0 ? -d2 : d2);
    const dn = near1 ? (d1 < 0 ? -d1 : d1) : d2 < 0 ? -d2 : d2;
    let gn = 0;
    if (dn <= GAUSS_CUTOFF) {
      const c = VELTKAMP * dn;
      const dh = c - (c - dn);
      const dl = dn - dh;
      const hi = dn * dn;
      gn = Math.exp(-0.5 * hi) * (1 - 0.5 * (dh * dh - hi + 2 * dh * dl + dl * dl));
    }
    const g1 = near1 ? gn : (gn * kd) / sd;
    const g2 = near1 ? (gn * sd) / kd : gn;
    const bv = b * iVst;
    // Both CDF values, from one call site: V8's cumulative inlining budget (920 bytecode bytes)
    // holds one copy of the CDF with its far tail, not two, and a call that is not inlined boxes
    // its doubles on the heap. The payoff that needs only one value ignores the other.
    m[7] = phi * d1;
    m[8] = g1;
    m[9] = phi * d2;
    m[10] = g2;
    for (let j = 7; j < 11; j += 2) m[j] = normCdfWithGaussian(m[j]!, m[j + 1]!);
    const cdf1 = m[7]!;
    const cdf2 = m[9]!;

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
      const p = phi * (sd * cdf1 - kd * cdf2);
      price = p > 0 ? p : 0; // rounding can leave a worthless wing a hair below zero
      const qn = dfQ * n1;
      delta = phi * dfQ * cdf1;
      gamma = qn * iS * iVst;
      vega = sd * n1 * sqrtT;
      dvdt = sd * n1 * vol * sqrtT * half + phi * ((b - r) * sd * cdf1 + r * kd * cdf2);
      rho = rhoCarry !== 0 ? phi * tau * kd * cdf2 : -tau * price;
      vanna = -qn * d2 * iVol;
      volga = vega * d1 * d2 * iVol;
      ddeltadt = phi * (b - r) * dfQ * cdf1 + qn * (bv - d2 * half);
    } else if (payoff === PAYOFF_CASH) {
      const n2 = INV_SQRT_2PI * g2;
      const a = cash * dfR;
      const an = phi * a * n2; // phi A e^{-r tau} n(d2)
      const dd2dt = bv - d1 * half; // d(d2)/dtau
      price = a * cdf2;
      delta = an * iS * iVst;
      gamma = -delta * d1 * iS * iVst;
      vega = -an * d1 * iVol;
      dvdt = an * dd2dt - r * price;
      rho = rhoCarry !== 0 ? an * sqrtT * iVol - tau * price : -tau * price;
      vanna = an * (d1 * d2 - 1) * iS * iVol * iVst;
      volga = -an * (d1 * d1 * d2 - d1 - d2) * iVol * iVol;
      ddeltadt = -delta * (r + d2 * dd2dt + half);
    } else {
      const n1 = INV_SQRT_2PI * g1;
      const qn = phi * dfQ * n1; // phi e^{(b-r) tau} n(d1)
      const dd1dt = bv - d2 * half; // d(d1)/dtau
      price = sd * cdf1;
      delta = dfQ * cdf1 + qn * iVst;
      gamma = -qn * d2 * iS * iVst * iVst;
      vega = -s * qn * d2 * iVol;
      dvdt = (b - r) * price + s * qn * dd1dt;
      rho = rhoCarry !== 0 ? s * qn * sqrtT * iVol : -tau * price;
      vanna = qn * ((d1 * d2 - 1) * iVst - d2) * iVol;
      volga = -s * qn * (d1 * d2 * d2 - d1 - d2) * iVol * iVol;
      ddeltadt = (b - r) * delta - qn * (dd1dt * d2 + half) * iVst;
    }

    oPrice[i] = price;
    oDelta[i] = delta;
    oGamma[i] = gamma;
    oVega[i] = vega * PER_POINT;
    oTheta[i] = -dvdt * PER_DAY;
    oRho[i] = rho * PER_POINT;
    oVanna[i] = vanna * PER_POINT;
    oVolga[i] = volga * PER_POINT_SQ;
    oCharm[i] = -ddeltadt * PER_DAY;
  }
}
