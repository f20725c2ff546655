import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { normCdf, optionGreeks, optionPrice } from './pricing.ts';

const require = createRequire(import.meta.url);
// General-purpose reference library from npm: black-scholes 1.1.0, blackScholes(s, k, t, v, r, 'call'|'put').
const bs = require('black-scholes') as {
  blackScholes(s: number, k: number, t: number, v: number, r: number, callPut: string): number;
};

describe('simulator pricer', () => {
  it('normal CDF matches standard table values', () => {
    // Standard normal table (any statistics handbook): Phi(1) = 0.841345, Phi(1.96) = 0.975002.
    expect(normCdf(0)).toBeCloseTo(0.5, 7);
    expect(normCdf(1)).toBeCloseTo(0.841345, 6);
    expect(normCdf(1.96)).toBeCloseTo(0.975002, 6);
    expect(normCdf(-1.96)).toBeCloseTo(0.024998, 6);
  });

  it('reproduces the textbook example S=42, K=40, r=10%, vol=20%, T=0.5 (call 4.76, put 0.81)', () => {
    // Hull, Options, Futures and Other Derivatives, the worked Black-Scholes-Merton example
    // (values quoted from memory to two decimals).
    const base = {
      spot: 42,
      strike: 40,
      tau: 0.5,
      vol: 0.2,
      rate: 0.1,
      carry: 0.1,
      payoff: 'vanilla' as const,
    };
    expect(optionPrice({ ...base, right: 'call' })).toBeCloseTo(4.76, 2);
    expect(optionPrice({ ...base, right: 'put' })).toBeCloseTo(0.81, 2);
  });

  it('agrees with the black-scholes npm package on vanillas without carry difference', () => {
    for (const [s, k, t, v, r] of [
      [100, 100, 1, 0.25, 0.04],
      [80, 100, 0.25, 0.4, 0.02],
      [120, 100, 2, 0.15, 0.05],
    ] as const) {
      for (const right of ['call', 'put'] as const) {
        const ours = optionPrice({
          right,
          payoff: 'vanilla',
          spot: s,
          strike: k,
          tau: t,
          vol: v,
          rate: r,
          carry: r,
        });
        // 4 decimals: the A&S CDF's 7.5e-8 error times a spot of 100 is about 1e-5.
        expect(ours).toBeCloseTo(bs.blackScholes(s, k, t, v, r, right), 4);
      }
    }
  });

  it('digitals: cash + asset decomposition of the vanilla (asset-or-nothing minus K cash-or-nothing)', () => {
    // Standard static replication: call = asset-digital call - K x cash-digital call paying 1.
    const q = {
      right: 'call' as const,
      spot: 105,
      strike: 100,
      tau: 0.75,
      vol: 0.3,
      rate: 0.03,
      carry: 0.01,
    };
    const vanilla = optionPrice({ ...q, payoff: 'vanilla' });
    const asset = optionPrice({ ...q, payoff: 'asset-digital' });
    const cash = optionPrice({ ...q, payoff: 'cash-digital', cashAmount: 1 });
    expect(asset - q.strike * cash).toBeCloseTo(vanilla, 10);
  });

  it('finite-difference Greeks match the closed forms for a vanilla call', () => {
    // Closed forms (common practice): delta = e^{(b-r)T} N(d1), vega = S e^{(b-r)T} phi(d1) sqrt(T).
    const q = {
      right: 'call' as const,
      payoff: 'vanilla' as const,
      spot: 100,
      strike: 95,
      tau: 0.5,
      vol: 0.25,
      rate: 0.04,
      carry: 0.02,
    };
    const sd = q.vol * Math.sqrt(q.tau);
    const d1 = (Math.log(q.spot / q.strike) + (q.carry + 0.5 * q.vol ** 2) * q.tau) / sd;
    const cdf = Math.exp((q.carry - q.rate) * q.tau);
    const pdf = Math.exp(-0.5 * d1 * d1) / Math.sqrt(2 * Math.PI);
    const g = optionGreeks(q);
    expect(g.delta).toBeCloseTo(cdf * normCdf(d1), 5);
    expect(g.gamma).toBeCloseTo((cdf * pdf) / (q.spot * sd), 4);
    expect(g.vega).toBeCloseTo(q.spot * cdf * pdf * Math.sqrt(q.tau) * 0.01, 5);
  });
});
