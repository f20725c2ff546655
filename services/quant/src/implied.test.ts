import { describe, expect, it } from 'vitest';
import { createRequire } from 'node:module';
import { priceOption } from './bsm.ts';
import { impliedVol, impliedVolBounds, ImpliedVolError } from './implied.ts';
import type { OptionInputs } from './types.ts';

const require = createRequire(import.meta.url);
const ivPkg = require('implied-volatility') as {
  getImpliedVolatility: (c: number, s: number, k: number, t: number, r: number, cp: string) => number;
};

const base = { payoff: 'vanilla' as const, spot: 100, rate: 0.03, carry: 0.01 };

describe('impliedVol recovers the vol that made the price', () => {
  it('Hull BSM example: the 4.76 call and 0.81 put at S=42 K=40 r=10% T=0.5 imply 20%', () => {
    // Hull's prices are rounded to the cent, so the implied vol is 20% to that precision only.
    const p = { payoff: 'vanilla' as const, spot: 42, strike: 40, tau: 0.5, rate: 0.1, carry: 0.1 };
    expect(impliedVol({ ...p, right: 'call', price: 4.76 })).toBeCloseTo(0.2, 3);
    expect(impliedVol({ ...p, right: 'put', price: 0.81 })).toBeCloseTo(0.2, 3);
  });

  it('to 1e-10 wherever the price determines the vol that well', () => {
    let checked = 0;
    for (const m of [0.5, 0.8, 0.95, 1, 1.05, 1.3, 2])
      for (const tau of [1 / 8760, 1 / 365, 0.25, 1, 5, 30])
        for (const vol of [0.01, 0.05, 0.2, 0.5, 1, 3])
          for (const right of ['call', 'put'] as const) {
            const p: OptionInputs = { ...base, right, strike: 100 * m, tau, vol };
            const g = priceOption(p);
            const { lower } = impliedVolBounds(p);
            // Condition: a 1e-10 change of vol must move the price by well over its rounding
            // error (~ 4 ulps of the intrinsic part plus the time value); otherwise the price
            // itself does not carry 1e-10 of vol and no solver can return it.
            const rawVega = g.vega * 100;
            const priceNoise = 4 * Number.EPSILON * (g.price + lower);
            if (!(g.price > lower) || rawVega * 1e-10 < 100 * priceNoise) continue;
            const iv = impliedVol({ ...p, price: g.price });
            expect(Math.abs(iv - vol), `${right} K=${100 * m} tau=${tau} vol=${vol}`).toBeLessThan(1e-10);
            checked++;
          }
    expect(checked).toBeGreaterThan(300);
  });

  it('converges for any price strictly inside the bounds (prices from 1e-300 of the range to 1 - 1e-15)', () => {
    // Seeded linear congruential sweep: the point is coverage, not statistics.
    let seed = 20240611;
    const rnd = (): number => (seed = (Math.imul(seed, 1103515245) + 12345) >>> 0) / 4294967296;
    for (let i = 0; i < 3000; i++) {
      const right = rnd() < 0.5 ? ('call' as const) : ('put' as const);
      const p = {
        right,
        payoff: 'vanilla' as const,
        spot: 100,
        strike: 100 * Math.exp(4 * (rnd() - 0.5)),
        tau: Math.exp(-9 + 13 * rnd()),
        rate: 0.1 * (rnd() - 0.3),
        carry: 0.1 * (rnd() - 0.5),
      };
      const { lower, upper } = impliedVolBounds(p);
      const u = rnd();
      const w = u < 0.3 ? Math.pow(10, -300 * rnd()) : u < 0.6 ? 1 - Math.pow(10, -15 * rnd()) : rnd();
      const target = lower + (upper - lower) * w;
      if (!(target > lower && target < upper)) continue;
      const iv = impliedVol({ ...p, price: target });
      expect(iv).toBeGreaterThan(0);
      // Backward error: the solved vol reprices the target. Deep out of the money (prices down to
      // 1e-300) the price formula itself subtracts two nearly equal terms, so allow 1e-9 there.
      const back = priceOption({ ...p, vol: iv }).price;
      const tv = target - lower; // time value: what the vol actually determines
      expect(Math.abs(back - target), `${JSON.stringify(p)} target=${target}`).toBeLessThanOrEqual(
        (tv < 1e-20 * upper ? 1e-9 : 1e-11) * tv + 8 * Number.EPSILON * upper,
      );
    }
  });

  it('agrees with the npm implied-volatility package (which stops at the cent)', () => {
    for (const k of [80, 100, 120]) {
      const p = {
        right: 'call' as const,
        payoff: 'vanilla' as const,
        spot: 100,
        strike: k,
        tau: 0.5,
        rate: 0.05,
        carry: 0.05,
      };
      const c = priceOption({ ...p, vol: 0.3 }).price;
      const theirs = ivPkg.getImpliedVolatility(c, 100, k, 0.5, 0.05, 'call');
      expect(Math.abs(impliedVol({ ...p, price: c }) - theirs)).toBeLessThan(1e-3);
    }
  });
});

describe('impliedVol refuses what has no implied vol', () => {
  const p = {
    right: 'call' as const,
    payoff: 'vanilla' as const,
    spot: 100,
    strike: 90,
    tau: 1,
    rate: 0.05,
    carry: 0.05,
  };
  it('a price at or beyond the no-arbitrage bounds, naming them', () => {
    const { lower, upper } = impliedVolBounds(p);
    expect(lower).toBeCloseTo(100 - 90 * Math.exp(-0.05), 12);
    expect(upper).toBe(100);
    for (const bad of [lower, lower - 1, upper, 150, 0, -1]) {
      try {
        impliedVol({ ...p, price: bad });
        expect.unreachable();
      } catch (e) {
        expect(e).toBeInstanceOf(ImpliedVolError);
        expect((e as Error).message).toMatch(/outside the no-arbitrage bounds \(14\.38\d+, 100\)/);
        expect((e as ImpliedVolError).lower).toBe(lower);
        expect((e as ImpliedVolError).upper).toBe(upper);
      }
    }
  });
  it('digitals, with the reason', () => {
    expect(() => impliedVol({ ...p, payoff: 'cash-digital', price: 0.5 })).toThrow(
      /vanilla options only.*not monotone in vol/,
    );
    expect(() => impliedVol({ ...p, payoff: 'asset-digital', price: 50 })).toThrow(ImpliedVolError);
  });
  it('expired options and bad numbers', () => {
    expect(() => impliedVol({ ...p, tau: 0, price: 10 })).toThrow(/tau must be > 0/);
    expect(() => impliedVol({ ...p, price: NaN })).toThrow(/price must be a finite number/);
    expect(() => impliedVol({ ...p, spot: 0, price: 10 })).toThrow(/spot must be a finite number > 0/);
  });
  it('a price one ulp below the upper bound still has its (large) implied vol', () => {
    const iv = impliedVol({ ...p, price: 100 - 1.5e-14 });
    expect(iv).toBeGreaterThan(10);
    expect(priceOption({ ...p, vol: iv }).price).toBeCloseTo(100, 12);
  });
});
