export type Right = 'call' | 'put';
export type Payoff = 'vanilla' | 'cash-digital' | 'asset-digital';

/**
 * One European option under generalized Black-Scholes-Merton with cost of carry b.
 * Forward F = spot * exp(carry * tau); discounting at exp(-rate * tau).
 */
export interface OptionInputs {
  right: Right;
  payoff: Payoff;
  /** S* for equity (already net of the PV of discrete dividends), F for futures, S for FX. */
  spot: number;
  strike: number;
  /** Years to expiry (ACT/365F). tau <= 0 means expired: intrinsic value, zero Greeks. */
  tau: number;
  vol: number;
  /** r: continuously compounded discount rate over tau. */
  rate: number;
  /** b: cost of carry (equity r - q, FX r_quote - r_base, futures 0). */
  carry: number;
  /** Cash-digital payout, default 1. */
  cashAmount?: number;
  /** true (default): a shift of r moves b too (equity, FX); false: b stays put (futures, b = 0). */
  rhoCarry?: boolean;
}

/**
 * Price and sensitivities per unit of the option. Units:
 * - delta = dV/dS, gamma = d2V/dS2
 * - vega = dV/dsigma x 0.01 (per vol point)
 * - theta = -dV/dtau / 365 with r, b, sigma and S held (per calendar day)
 * - rho = dV/dr x 0.01 (b moves with r when rhoCarry, else b is held)
 * - vanna = d2V/dS dsigma x 0.01 (delta change per vol point)
 * - volga = d2V/dsigma2 x 1e-4 (change of per-point vega per vol point)
 * - charm = -d(delta)/dtau / 365 (delta change per calendar day)
 */
export interface Greeks {
  price: number;
  delta: number;
  gamma: number;
  vega: number;
  theta: number;
  rho: number;
  vanna: number;
  volga: number;
  charm: number;
}

/** Struct-of-arrays input for the batch pricer. Codes: right 0 call / 1 put; payoff 0 vanilla / 1 cash / 2 asset. */
export interface OptionBatch {
  n: number;
  right: Uint8Array;
  payoff: Uint8Array;
  spot: Float64Array;
  strike: Float64Array;
  tau: Float64Array;
  vol: Float64Array;
  rate: Float64Array;
  carry: Float64Array;
  cashAmount: Float64Array;
  rhoCarry: Uint8Array;
}

/** Struct-of-arrays output of the batch pricer, in the units of Greeks. */
export interface GreeksBatch {
  price: Float64Array;
  delta: Float64Array;
  gamma: Float64Array;
  vega: Float64Array;
  theta: Float64Array;
  rho: Float64Array;
  vanna: Float64Array;
  volga: Float64Array;
  charm: Float64Array;
}

export const RIGHT_CODE = { call: 0, put: 1 } as const satisfies Record<Right, number>;
export const PAYOFF_CODE = { vanilla: 0, 'cash-digital': 1, 'asset-digital': 2 } as const satisfies Record<
  Payoff,
  number
>;
