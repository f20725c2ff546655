import { describe, expect, it } from 'vitest';
import { createRequire } from 'node:module';
import { priceOption, validateOptionInputs } from './bsm.ts';
import type { Greeks, OptionInputs, Payoff, Right } from './types.ts';

// The two npm packages are CommonJS without types.
const require = createRequire(import.meta.url);
const bsPkg = require('black-scholes') as {
  blackScholes: (s: number, k: number, t: number, v: number, r: number, cp: string) => number;
};
const greeksPkg = require('greeks') as Record<
  'getDelta' | 'getGamma' | 'getVega' | 'getTheta' | 'getRho',
  (s: number, k: number, t: number, v: number, r: number, cp?: string) => number
>;

function opt(
  right: Right,
  payoff: Payoff,
  spot: number,
  strike: number,
  tau: number,
  rate: number,
  carry: number,
  vol: number,
  extra: Partial<OptionInputs> = {},
): OptionInputs {
  return { right, payoff, spot, strike, tau, rate, carry, vol, ...extra };
}
const price = (p: OptionInputs): number => priceOption(p).price;

describe('published worked examples', () => {
  it('Hull, Options, Futures and Other Derivatives, BSM chapter example: S=42 K=40 r=10% sigma=20% T=0.5', () => {
    // Hull prints c = 4.76 and p = 0.81.
    expect(price(opt('call', 'vanilla', 42, 40, 0.5, 0.1, 0.1, 0.2))).toBeCloseTo(4.76, 2);
    expect(price(opt('put', 'vanilla', 42, 40, 0.5, 0.1, 0.1, 0.2))).toBeCloseTo(0.81, 2);
  });

  it('Hull, Greek letters chapter: S=49 K=50 r=5% sigma=20% T=20 weeks (from memory)', () => {
    // Hull quotes delta 0.522, gamma 0.066, theta -4.31 per year, vega 12.1 and rho 8.91 per
    // unit change (our vega and rho are per 0.01, our theta per calendar day).
    const g = priceOption(opt('call', 'vanilla', 49, 50, 20 / 52, 0.05, 0.05, 0.2));
    expect(g.price).toBeCloseTo(2.4, 2); // Hull: $240,000 for 100,000 options
    expect(g.delta).toBeCloseTo(0.522, 3);
    expect(g.gamma).toBeCloseTo(0.066, 3);
    expect(g.theta * 365).toBeCloseTo(-4.31, 2);
    expect(g.vega * 100).toBeCloseTo(12.1, 1);
    expect(g.rho * 100).toBeCloseTo(8.91, 2);
  });

  // E. G. Haug, The Complete Guide to Option Pricing Formulas, 2nd ed. (2007): the worked
  // examples of chapters 1 and 2, printed to 4 decimals. The inputs and values are quoted from
  // memory. Arguments: S, K, T, r, b, sigma.
  it('Haug 1.1.1 Black-Scholes call: 60, 65, 0.25, 8%, b = r, 30% -> 2.1334', () => {
    expect(price(opt('call', 'vanilla', 60, 65, 0.25, 0.08, 0.08, 0.3))).toBeCloseTo(2.1334, 4);
  });
  it('Haug 1.1.2 Merton with dividend yield, put: 100, 95, 0.5, r 10%, q 5%, 20% -> 2.4648', () => {
    expect(price(opt('put', 'vanilla', 100, 95, 0.5, 0.1, 0.1 - 0.05, 0.2))).toBeCloseTo(2.4648, 4);
  });
  it('Haug 1.1.3 Black-76 on a future: F 19, K 19, 0.75, r 10%, 28% -> call = put = 1.7011', () => {
    const fut = { rhoCarry: false };
    expect(price(opt('call', 'vanilla', 19, 19, 0.75, 0.1, 0, 0.28, fut))).toBeCloseTo(1.7011, 4);
    expect(price(opt('put', 'vanilla', 19, 19, 0.75, 0.1, 0, 0.28, fut))).toBeCloseTo(1.7011, 4);
  });
  it('Haug 1.1.5 Garman-Kohlhagen call: 1.56, 1.60, 0.5, r 6%, rf 8%, 12% -> 0.0291', () => {
    expect(price(opt('call', 'vanilla', 1.56, 1.6, 0.5, 0.06, 0.06 - 0.08, 0.12))).toBeCloseTo(0.0291, 4);
  });
  it('Haug 1.1.6 generalized BSM put: 75, 70, 0.5, r 10%, b 5%, 35% -> 4.0870', () => {
    expect(price(opt('put', 'vanilla', 75, 70, 0.5, 0.1, 0.05, 0.35))).toBeCloseTo(4.087, 4);
  });
  it('Haug cash-or-nothing put (Reiner-Rubinstein): 100, 80, 0.75, r 6%, b 0, 35%, cash 10 -> 2.6710', () => {
    expect(price(opt('put', 'cash-digital', 100, 80, 0.75, 0.06, 0, 0.35, { cashAmount: 10 }))).toBeCloseTo(
      2.671,
      4,
    );
  });
  it('Haug asset-or-nothing put: 70, 65, 0.5, r 7%, q 5%, 27% -> 20.2069', () => {
    expect(price(opt('put', 'asset-digital', 70, 65, 0.5, 0.07, 0.07 - 0.05, 0.27))).toBeCloseTo(20.2069, 4);
  });
  it('Haug chapter 2 Greeks: delta, gamma, theta and rho examples', () => {
    // Futures option delta: 105, 100, 0.5, r 10%, b 0, 36% -> call 0.5946, put -0.3566
    expect(priceOption(opt('call', 'vanilla', 105, 100, 0.5, 0.1, 0, 0.36)).delta).toBeCloseTo(0.5946, 4);
    expect(priceOption(opt('put', 'vanilla', 105, 100, 0.5, 0.1, 0, 0.36)).delta).toBeCloseTo(-0.3566, 4);
    // Gamma: 55, 60, 0.75, r 10%, b 10%, 30% -> 0.0278
    expect(priceOption(opt('call', 'vanilla', 55, 60, 0.75, 0.1, 0.1, 0.3)).gamma).toBeCloseTo(0.0278, 4);
    // Theta of an index put: 430, 405, 0.0833, r 7%, q 5%, 20% -> -31.1924 per year
    expect(priceOption(opt('put', 'vanilla', 430, 405, 0.0833, 0.07, 0.02, 0.2)).theta * 365).toBeCloseTo(
      -31.1924,
      3,
    );
    // Rho: 72, 75, 1, r 9%, b 9%, 19% -> call 38.7325 per unit of r
    expect(priceOption(opt('call', 'vanilla', 72, 75, 1, 0.09, 0.09, 0.19)).rho * 100).toBeCloseTo(
      38.7325,
      3,
    );
  });
});

// A spread of ordinary cases: S, K, tau, r, b, sigma.
const CASES: [number, number, number, number, number, number][] = [
  [100, 95, 0.5, 0.05, 0.02, 0.25],
  [100, 120, 2, 0.03, -0.01, 0.4],
  [50, 48, 0.1, 0.01, 0.01, 0.15],
  [1.1, 1.15, 0.75, 0.04, 0.02, 0.1],
  [80, 80, 1, 0.05, 0, 0.3],
  [100, 60, 3, -0.005, 0.03, 0.6],
  [100, 100, 1 / 8760, 0.05, 0.03, 0.2], // one hour
  [100, 140, 30, 0.04, 0.01, 0.25], // thirty years
];

describe('parity relations (common practice, no source needed)', () => {
  it.each(CASES)('S=%f K=%f tau=%f r=%f b=%f sigma=%f', (s, k, t, r, b, v) => {
    const dfR = Math.exp(-r * t);
    const sd = s * Math.exp((b - r) * t);
    const tol = 1e-12 * s;
    const c = priceOption(opt('call', 'vanilla', s, k, t, r, b, v));
    const p = priceOption(opt('put', 'vanilla', s, k, t, r, b, v));
    expect(c.price - p.price).toBeCloseTo(sd - k * dfR, 11);
    // Greeks that parity makes identical for calls and puts
    expect(c.gamma).toBeCloseTo(p.gamma, 12);
    expect(c.vega).toBeCloseTo(p.vega, 12);
    expect(c.vanna).toBeCloseTo(p.vanna, 12);
    expect(c.volga).toBeCloseTo(p.volga, 12);
    expect(c.delta - p.delta).toBeCloseTo(Math.exp((b - r) * t), 12);

    const cashC = priceOption(opt('call', 'cash-digital', s, k, t, r, b, v, { cashAmount: 7 }));
    const cashP = priceOption(opt('put', 'cash-digital', s, k, t, r, b, v, { cashAmount: 7 }));
    expect(Math.abs(cashC.price + cashP.price - 7 * dfR)).toBeLessThan(tol);
    expect(Math.abs(cashC.delta + cashP.delta)).toBeLessThan(1e-12);

    const assetC = priceOption(opt('call', 'asset-digital', s, k, t, r, b, v));
    const assetP = priceOption(opt('put', 'asset-digital', s, k, t, r, b, v));
    expect(Math.abs(assetC.price + assetP.price - sd)).toBeLessThan(tol);

    // Asset-or-nothing minus K cash-or-nothing is the vanilla, Greek by Greek.
    const unitC = priceOption(opt('call', 'cash-digital', s, k, t, r, b, v, { cashAmount: k }));
    const unitP = priceOption(opt('put', 'cash-digital', s, k, t, r, b, v, { cashAmount: k }));
    for (const key of [
      'price',
      'delta',
      'gamma',
      'vega',
      'theta',
      'rho',
      'vanna',
      'volga',
      'charm',
    ] as const) {
      const scale = Math.max(1, Math.abs(c[key]), Math.abs(assetC[key]));
      expect(Math.abs(assetC[key] - unitC[key] - c[key]), `call ${key}`).toBeLessThan(1e-11 * scale);
      expect(Math.abs(unitP[key] - assetP[key] - p[key]), `put ${key}`).toBeLessThan(1e-11 * scale);
    }
  });
});

describe('every Greek against central finite differences of the price', () => {
  type Field = 'spot' | 'vol' | 'tau' | 'rate';
  const bump = (p: OptionInputs, f: Field, h: number): OptionInputs => {
    const q = { ...p, [f]: p[f] + h };
    if (f === 'rate' && p.rhoCarry !== false) q.carry = p.carry + h; // b moves with r
    return q;
  };
  const d = (p: OptionInputs, f: Field, h: number, g: (x: Greeks) => number): number =>
    (g(priceOption(bump(p, f, h))) - g(priceOption(bump(p, f, -h)))) / (2 * h);

  const payoffs: Payoff[] = ['vanilla', 'cash-digital', 'asset-digital'];
  const rows = CASES.flatMap((c) =>
    payoffs.flatMap((pay) => (['call', 'put'] as const).map((r) => [r, pay, ...c] as const)),
  );
  it.each(rows)('%s %s S=%f K=%f tau=%f r=%f b=%f sigma=%f', (right, payoff, s, k, t, r, b, v) => {
    for (const rhoCarry of [true, false]) {
      const p = opt(right, payoff, s, k, t, r, b, v, {
        rhoCarry,
        cashAmount: payoff === 'cash-digital' ? 3 : undefined,
      });
      const g = priceOption(p);
      // Steps on each variable's natural scale: spot moves by a small fraction of S sigma sqrt(t).
      const hs = 3e-4 * s * v * Math.sqrt(t);
      const hv = v * 1e-4;
      const ht = t * 1e-4;
      const hr = 1e-5;
      const fd = {
        delta: d(p, 'spot', hs, (x) => x.price),
        gamma: d(p, 'spot', hs, (x) => x.delta),
        vega: d(p, 'vol', hv, (x) => x.price) * 0.01,
        theta: -d(p, 'tau', ht, (x) => x.price) / 365,
        rho: d(p, 'rate', hr, (x) => x.price) * 0.01,
        vanna: d(p, 'vol', hv, (x) => x.delta) * 0.01,
        volga: d(p, 'vol', hv, (x) => x.vega) * 0.01,
        charm: -d(p, 'tau', ht, (x) => x.delta) / 365,
      };
      // vanna also as the spot derivative of vega: the two analytic formulas must agree
      const vannaFromVega = d(p, 'spot', hs, (x) => x.vega);
      for (const [key, want] of Object.entries(fd) as [keyof typeof fd, number][]) {
        const got = g[key];
        // Central differences are O(h^2): 1e-6 relative, with a floor for Greeks that are near 0
        // relative to the option's scale.
        const floor = 1e-9 * Math.max(1, s) * (key === 'gamma' || key === 'vanna' ? 1 / s : 1);
        expect(Math.abs(got - want), `${key} rhoCarry=${rhoCarry}: ${got} vs ${want}`).toBeLessThan(
          1e-6 * Math.abs(want) + floor,
        );
      }
      expect(Math.abs(g.vanna - vannaFromVega)).toBeLessThan(1e-6 * Math.abs(g.vanna) + 1e-9);
    }
  });
});

describe('against the npm black-scholes and greeks packages (no dividends: b = r)', () => {
  const grid: [number, number, number, number, number][] = [];
  for (const k of [60, 90, 100, 110, 160])
    for (const t of [0.05, 0.5, 2])
      for (const v of [0.1, 0.3, 0.8]) for (const r of [0, 0.03, 0.1]) grid.push([100, k, t, v, r]);
  it('prices agree to 1e-9 absolute', () => {
    for (const [s, k, t, v, r] of grid) {
      for (const right of ['call', 'put'] as const) {
        const ours = price(opt(right, 'vanilla', s, k, t, r, r, v));
        expect(
          Math.abs(ours - bsPkg.blackScholes(s, k, t, v, r, right)),
          `${right} ${k} ${t} ${v} ${r}`,
        ).toBeLessThan(1e-9);
      }
    }
  });
  it('delta, gamma, vega (per 1%), theta (per calendar day), rho (per 1%) agree', () => {
    for (const [s, k, t, v, r] of grid) {
      for (const right of ['call', 'put'] as const) {
        const g = priceOption(opt(right, 'vanilla', s, k, t, r, r, v));
        expect(g.delta).toBeCloseTo(greeksPkg.getDelta(s, k, t, v, r, right), 9);
        expect(g.gamma).toBeCloseTo(greeksPkg.getGamma(s, k, t, v, r), 9);
        expect(g.vega).toBeCloseTo(greeksPkg.getVega(s, k, t, v, r), 9);
        expect(g.theta).toBeCloseTo(greeksPkg.getTheta(s, k, t, v, r, right), 9);
        expect(g.rho).toBeCloseTo(greeksPkg.getRho(s, k, t, v, r, right), 9);
      }
    }
  });
});

describe('extreme but valid inputs stay finite and inside the no-arbitrage bounds', () => {
  it('a grid of vols 0.0005..5, an hour to 30 years, strikes 1% to 100x spot', () => {
    let n = 0;
    for (const v of [0.0005, 0.01, 0.3, 2, 5])
      for (const t of [1 / 8760, 1 / 365, 1, 30])
        for (const m of [0.01, 0.5, 0.99, 1, 1.01, 2, 100])
          for (const r of [-0.01, 0, 0.05, 0.2])
            for (const b of [-0.05, 0, 0.1])
              for (const payoff of ['vanilla', 'cash-digital', 'asset-digital'] as const)
                for (const right of ['call', 'put'] as const)
                  for (const rhoCarry of [true, false]) {
                    const s = 100;
                    const k = 100 * m;
                    const g = priceOption(opt(right, payoff, s, k, t, r, b, v, { rhoCarry, cashAmount: 5 }));
                    for (const [key, val] of Object.entries(g)) {
                      expect(
                        Number.isFinite(val),
                        `${key} ${right} ${payoff} v=${v} t=${t} m=${m} r=${r} b=${b}`,
                      ).toBe(true);
                    }
                    const sd = s * Math.exp((b - r) * t);
                    const kd = k * Math.exp(-r * t);
                    const slack = 1e-12 * Math.max(sd, kd);
                    const [lo, hi] =
                      payoff === 'vanilla'
                        ? right === 'call'
                          ? [Math.max(sd - kd, 0), sd]
                          : [Math.max(kd - sd, 0), kd]
                        : payoff === 'cash-digital'
                          ? [0, 5 * Math.exp(-r * t)]
                          : [0, sd];
                    expect(g.price).toBeGreaterThanOrEqual(lo - slack);
                    expect(g.price).toBeLessThanOrEqual(hi + slack);
                    if (payoff === 'vanilla') expect(g.gamma).toBeGreaterThanOrEqual(0);
                    n++;
                  }
    expect(n).toBe(5 * 4 * 7 * 4 * 3 * 3 * 2 * 2);
  });
  it('deep in and out of the money: worth the discounted forward intrinsic, delta at its limit', () => {
    // sigma sqrt(t) = 0.0005 / sqrt(8760): nothing but the forward matters
    const t = 1 / 8760;
    const itm = priceOption(opt('call', 'vanilla', 100, 90, t, 0.05, 0.02, 0.0005));
    expect(itm.price).toBeCloseTo(100 * Math.exp(-0.03 * t) - 90 * Math.exp(-0.05 * t), 12);
    expect(itm.delta).toBeCloseTo(Math.exp(-0.03 * t), 14);
    expect(itm.gamma).toBe(0);
    const otm = priceOption(opt('put', 'vanilla', 100, 90, t, 0.05, 0.02, 0.0005));
    expect(otm.price).toBe(0);
    expect(otm.delta).toBeCloseTo(0, 300);
  });
});

describe('expired options (tau <= 0)', () => {
  it('are worth their intrinsic value with zero Greeks', () => {
    const zero = { delta: 0, gamma: 0, vega: 0, theta: 0, rho: 0, vanna: 0, volga: 0, charm: 0 };
    expect(priceOption(opt('call', 'vanilla', 105, 100, 0, 0.05, 0.05, 0.2))).toEqual({ price: 5, ...zero });
    expect(priceOption(opt('put', 'vanilla', 105, 100, -0.01, 0.05, 0.05, 0.2))).toEqual({
      price: 0,
      ...zero,
    });
    expect(priceOption(opt('put', 'cash-digital', 95, 100, 0, 0.05, 0.05, 0.2, { cashAmount: 4 }))).toEqual({
      price: 4,
      ...zero,
    });
    expect(priceOption(opt('call', 'cash-digital', 95, 100, 0, 0.05, 0.05, 0.2))).toEqual({
      price: 0,
      ...zero,
    });
    expect(priceOption(opt('call', 'asset-digital', 105, 100, 0, 0.05, 0.05, 0.2))).toEqual({
      price: 105,
      ...zero,
    });
    // at the strike nothing is in the money
    expect(priceOption(opt('call', 'cash-digital', 100, 100, 0, 0.05, 0.05, 0.2)).price).toBe(0);
    // the vol of an expired option does not matter
    expect(priceOption(opt('call', 'vanilla', 105, 100, 0, 0.05, 0.05, 0)).price).toBe(5);
  });
});

describe('input validation names the field', () => {
  const good = opt('call', 'vanilla', 100, 100, 1, 0.05, 0.05, 0.2);
  it.each([
    [{ spot: -1 }, /spot must be a finite number > 0/],
    [{ strike: NaN }, /strike/],
    [{ vol: 0 }, /vol must be/],
    [{ tau: Infinity }, /tau/],
    [{ rate: NaN }, /rate/],
    [{ carry: Infinity }, /carry/],
    [{ cashAmount: 0 }, /cashAmount/],
    [{ right: 'straddle' as Right }, /right must be call or put/],
    [{ payoff: 'barrier' as Payoff }, /payoff must be vanilla, cash-digital or asset-digital/],
  ])('%o', (patch, msg) => {
    expect(() => priceOption({ ...good, ...patch })).toThrow(msg);
    expect(() => validateOptionInputs({ ...good, ...patch })).toThrow(RangeError);
  });
});
