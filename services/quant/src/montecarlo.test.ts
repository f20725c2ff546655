// Seeded Monte Carlo under geometric Brownian motion, an outside check on the model itself.
// Under the risk-neutral measure ln S_T ~ N(ln S + (b - sigma^2/2) T, sigma^2 T), so
// P(S_T > K) = N(d2); with the asset as numeraire the drift is b + sigma^2/2 and P(S_T > K) =
// N(d1) (textbook results, e.g. Hull, ch. on BSM, and Haug 1.1). The simulated frequencies and
// discounted payoffs must sit within 4 standard errors of the formulas.
import { describe, expect, it } from 'vitest';
import { Xoshiro128 } from '../test/prng.ts';
import { priceOption } from './bsm.ts';
import { normCdf } from './normal.ts';

const PATHS = 400_000;

describe('Monte Carlo under GBM (seeded xoshiro128** + Box-Muller)', () => {
  const cases = [
    { spot: 100, strike: 105, tau: 0.75, vol: 0.3, rate: 0.04, carry: 0.01 },
    { spot: 100, strike: 80, tau: 2, vol: 0.2, rate: 0.02, carry: 0.02 },
    { spot: 1.1, strike: 1.05, tau: 0.25, vol: 0.12, rate: 0.05, carry: 0.02 },
  ];
  it.each(cases)('probabilities N(d2), N(d1) and digital prices: %o', (c) => {
    const rng = new Xoshiro128(0x5eed + Math.round(c.strike * 1000));
    const sqrtT = Math.sqrt(c.tau);
    const d1 = (Math.log(c.spot / c.strike) + (c.carry + 0.5 * c.vol * c.vol) * c.tau) / (c.vol * sqrtT);
    const d2 = d1 - c.vol * sqrtT;
    let hitsQ = 0;
    let hitsS = 0;
    let assetSum = 0;
    let assetSq = 0;
    let callSum = 0;
    let callSq = 0;
    for (let i = 0; i < PATHS; i++) {
      const z = rng.normal();
      const sQ = c.spot * Math.exp((c.carry - 0.5 * c.vol * c.vol) * c.tau + c.vol * sqrtT * z);
      const sS = c.spot * Math.exp((c.carry + 0.5 * c.vol * c.vol) * c.tau + c.vol * sqrtT * z);
      if (sQ > c.strike) {
        hitsQ++;
        assetSum += sQ;
        assetSq += sQ * sQ;
        const payoff = sQ - c.strike;
        callSum += payoff;
        callSq += payoff * payoff;
      }
      if (sS > c.strike) hitsS++;
    }
    const check = (mean: number, se: number, want: number, what: string): void => {
      expect(Math.abs(mean - want), `${what}: ${mean} vs ${want}, se ${se}`).toBeLessThan(4 * se);
    };
    const pQ = hitsQ / PATHS;
    check(pQ, Math.sqrt((pQ * (1 - pQ)) / PATHS), normCdf(d2), 'P_Q(S_T > K) = N(d2)');
    const pS = hitsS / PATHS;
    check(pS, Math.sqrt((pS * (1 - pS)) / PATHS), normCdf(d1), 'P_S(S_T > K) = N(d1)');

    const df = Math.exp(-c.rate * c.tau);
    const meanStd = (sum: number, sq: number): [number, number] => {
      const m = sum / PATHS;
      return [m, Math.sqrt((sq / PATHS - m * m) / PATHS)];
    };
    const base = { ...c, right: 'call' as const };
    check(
      df * pQ,
      df * Math.sqrt((pQ * (1 - pQ)) / PATHS),
      priceOption({ ...base, payoff: 'cash-digital' }).price,
      'cash-or-nothing call',
    );
    const [am, as] = meanStd(assetSum, assetSq);
    check(df * am, df * as, priceOption({ ...base, payoff: 'asset-digital' }).price, 'asset-or-nothing call');
    const [cm, cs] = meanStd(callSum, callSq);
    check(df * cm, df * cs, priceOption({ ...base, payoff: 'vanilla' }).price, 'vanilla call');
  });

  it('the generator is deterministic and uniform enough to trust', () => {
    const a = new Xoshiro128(42);
    const b = new Xoshiro128(42);
    for (let i = 0; i < 100; i++) expect(a.nextUint32()).toBe(b.nextUint32());
    const r = new Xoshiro128(7);
    let sum = 0;
    let sq = 0;
    const n = 200_000;
    for (let i = 0; i < n; i++) {
      const z = r.normal();
      sum += z;
      sq += z * z;
    }
    expect(Math.abs(sum / n)).toBeLessThan(4 / Math.sqrt(n)); // mean 0
    expect(Math.abs(sq / n - 1)).toBeLessThan(4 * Math.sqrt(2 / n)); // variance 1 (var of z^2 is 2)
  });
});
