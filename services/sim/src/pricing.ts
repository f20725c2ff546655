/**
 * A small generalized Black-Scholes-Merton pricer, used by the simulator only to quote sensible
 * trade premiums and to size limits against the book it generates. The engine values positions
 * with @keelson/quant; this copy exists so that the simulator depends on nothing but the contract.
 * Pure functions over numbers.
 */

/**
 * Standard normal CDF, Abramowitz & Stegun 26.2.17 (absolute error < 7.5e-8): ample for
 * quoting premiums and sizing limits.
 */
export function normCdf(x: number): number {
  const t = 1 / (1 + 0.2316419 * Math.abs(x));
  const poly =
    t * (0.31938153 + t * (-0.356563782 + t * (1.781477937 + t * (-1.821255978 + t * 1.330274429))));
  const tail = normPdf(x) * poly;
  return x >= 0 ? 1 - tail : tail;
}

export function normPdf(x: number): number {
  return Math.exp(-0.5 * x * x) / Math.sqrt(2 * Math.PI);
}

export type Right = 'call' | 'put';
export type Payoff = 'vanilla' | 'cash-digital' | 'asset-digital';

export interface OptionQuote {
  right: Right;
  payoff: Payoff;
  /** spot (dividend-adjusted for equities) or futures price */
  spot: number;
  strike: number;
  /** years to expiry */
  tau: number;
  vol: number;
  /** discount rate r */
  rate: number;
  /** cost of carry b: r - q for equities, r_quote - r_base for FX, 0 for futures */
  carry: number;
  /** paid by a cash-digital that finishes in the money */
  cashAmount?: number;
}

function intrinsic(q: OptionQuote): number {
  const itm = q.right === 'call' ? q.spot > q.strike : q.spot < q.strike;
  switch (q.payoff) {
    case 'vanilla':
      return Math.max(q.right === 'call' ? q.spot - q.strike : q.strike - q.spot, 0);
    case 'cash-digital':
      return itm ? (q.cashAmount ?? 0) : 0;
    case 'asset-digital':
      return itm ? q.spot : 0;
  }
}

/** Present value per unit. */
export function optionPrice(q: OptionQuote): number {
  if (q.tau <= 0) return intrinsic(q);
  const sd = q.vol * Math.sqrt(q.tau);
  const d1 = (Math.log(q.spot / q.strike) + (q.carry + 0.5 * q.vol * q.vol) * q.tau) / sd;
  const d2 = d1 - sd;
  const carryDf = Math.exp((q.carry - q.rate) * q.tau);
  const df = Math.exp(-q.rate * q.tau);
  const sign = q.right === 'call' ? 1 : -1;
  switch (q.payoff) {
    case 'vanilla':
      return sign * (q.spot * carryDf * normCdf(sign * d1) - q.strike * df * normCdf(sign * d2));
    case 'cash-digital':
      return (q.cashAmount ?? 0) * df * normCdf(sign * d2);
    case 'asset-digital':
      return q.spot * carryDf * normCdf(sign * d1);
  }
}

export interface QuoteGreeks {
  price: number;
  delta: number;
  gamma: number;
  /** per vol point (0.01) */
  vega: number;
}

/**
 * Price, delta, gamma and vega by central differences on the price: one code path for every
 * payoff, accurate to well under a percent, which is all limit sizing needs.
 */
export function optionGreeks(q: OptionQuote): QuoteGreeks {
  const price = optionPrice(q);
  if (q.tau <= 0) return { price, delta: 0, gamma: 0, vega: 0 };
  const h = q.spot * 1e-3;
  const up = optionPrice({ ...q, spot: q.spot + h });
  const down = optionPrice({ ...q, spot: q.spot - h });
  const dv = 1e-4;
  const volUp = optionPrice({ ...q, vol: q.vol + dv });
  const volDown = optionPrice({ ...q, vol: Math.max(q.vol - dv, 1e-6) });
  return {
    price,
    delta: (up - down) / (2 * h),
    gamma: (up - 2 * price + down) / (h * h),
    vega: ((volUp - volDown) / (2 * dv)) * 0.01,
  };
}
