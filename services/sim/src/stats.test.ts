/**
 * Statistics of the simulated prices against the models they claim to follow.
 *
 * GBM under the risk-neutral measure (common practice; e.g. any derivatives textbook's
 * treatment of Black-Scholes dynamics): ln(S(t+dt)/S(t)) ~ N((r - q - sigma^2/2) dt, sigma^2 dt).
 * Merton jump-diffusion with normal log-jumps (Merton 1976), intensity lambda, jump mean m and
 * sd s, compensated so the discounted price stays a martingale: mean
 * (r - q - sigma^2/2 - lambda k + lambda m) dt with k = exp(m + s^2/2) - 1, variance
 * (sigma^2 + lambda (m^2 + s^2)) dt.
 * Tolerances come from standard errors: the mean of N standard normals has SE 1/sqrt(N), the
 * mean of their squares (chi-square, 1 dof) SE sqrt(2/N), a sample correlation SE about
 * (1 - rho^2)/sqrt(N). Four standard errors: a seeded test that is right fails with odds
 * under 1 in 10 000.
 */
import type { CurveMsg, SpotMsg } from '@keelson/shared-types';
import { describe, expect, it } from 'vitest';
import { JUMP_MEAN, JUMP_SD, MS_PER_YEAR } from './market.ts';
import { MarketSim, type SimOptions } from './sim.ts';

const START = Date.UTC(2026, 2, 2, 14, 30);
const QUIET: Partial<SimOptions> = {
  trades: 0,
  tradesPerMinute: 0,
  malformedPerMinute: 0,
  surfaceShocksPerMinute: 0,
  curveMovesPerMinute: 0,
  outagesPerHour: 0,
  tickProbability: 1,
  surfaceMode: 'sticky-strike',
};

/** Log-returns of every name between consecutive ticks of a grid where every name ticks. */
function logReturns(opts: SimOptions, steps: number) {
  const sim = new MarketSim(opts);
  const boot = sim.bootstrap();
  const last = new Map<string, number>();
  for (const m of boot) if (m.type === 'spot') last.set(m.underlying, m.price);
  const returns = new Map<string, number[]>();
  const tick = opts.tickIntervalMs ?? 250;
  for (let k = 1; k <= steps; k++) {
    for (const m of sim.step(START + k * tick).messages) {
      if (m.type !== 'spot') continue;
      const s = m as SpotMsg;
      const prev = last.get(s.underlying);
      if (prev === undefined) continue;
      const list = returns.get(s.underlying) ?? [];
      list.push(Math.log(s.price / prev));
      returns.set(s.underlying, list);
      last.set(s.underlying, s.price);
    }
  }
  const curves = new Map(
    boot.filter((m): m is CurveMsg => m.type === 'curve').map((c) => [c.currency, c.zeroRates[0] ?? 0]),
  );
  return { sim, returns, curves };
}

const mean = (xs: readonly number[]) => xs.reduce((s, x) => s + x, 0) / xs.length;

describe('spot dynamics', () => {
  // One grid interval of one minute stands for a quarter year of market time: large steps make
  // the drift visible against the noise.
  const dtYears = 0.25;
  const tickIntervalMs = 60_000;
  const marketSpeed = (dtYears * MS_PER_YEAR) / tickIntervalMs;

  it('log-returns have the mean and variance of risk-neutral GBM (independent names, no jumps)', () => {
    const { sim, returns, curves } = logReturns(
      {
        seed: 21,
        startMs: START,
        underlyings: 113,
        tickIntervalMs,
        marketSpeed,
        jumpsPerDay: 0,
        marketLoading: 0,
        sectorLoading: 0,
        ...QUIET,
      },
      200,
    );
    const z: number[] = [];
    const zNoIto: number[] = [];
    const names = sim
      .universe()
      .underlyings.filter((u) => u.simKind === 'equity' && u.discreteDividends === 0);
    expect(names.length).toBeGreaterThan(50);
    for (const u of names) {
      const r = curves.get(u.currency) ?? Number.NaN; // flat below the first tenor: the contract's curve rule
      const sd = u.vol * Math.sqrt(dtYears);
      const m = (r - u.dividendYield - 0.5 * u.vol * u.vol) * dtYears;
      const list = returns.get(u.name) ?? [];
      expect(list).toHaveLength(200);
      for (const x of list) {
        z.push((x - m) / sd);
        zNoIto.push((x - (r - u.dividendYield) * dtYears) / sd);
      }
    }
    const n = z.length;
    const se = 1 / Math.sqrt(n);
    expect(Math.abs(mean(z))).toBeLessThan(4 * se);
    expect(Math.abs(mean(z.map((x) => x * x)) - 1)).toBeLessThan(4 * Math.sqrt(2 / n));
    // The test has power: forgetting the Ito term -sigma^2/2 would be caught.
    expect(Math.abs(mean(zNoIto))).toBeGreaterThan(4 * se);
  });

  it('an FX pair drifts at r_quote - r_base (Garman-Kohlhagen carry)', () => {
    const { sim, returns, curves } = logReturns(
      {
        seed: 5,
        startMs: START,
        underlyings: 13,
        tickIntervalMs,
        marketSpeed: marketSpeed * 4,
        jumpsPerDay: 0,
        ...QUIET,
      },
      4000,
    );
    const dt = 1; // a year per step
    const pairs = sim.universe().underlyings.filter((u) => u.simKind === 'fx');
    for (const u of pairs) {
      const base = u.name.slice(0, 3);
      const carry = (curves.get(u.currency) ?? 0) - (curves.get(base) ?? 0);
      const list = returns.get(u.name) ?? [];
      const m = (carry - 0.5 * u.vol * u.vol) * dt;
      const se = (u.vol * Math.sqrt(dt)) / Math.sqrt(list.length);
      expect(Math.abs(mean(list) - m), u.name).toBeLessThan(4 * se);
    }
  });

  it('factor correlation between names is close to the configured loadings', () => {
    const { sim, returns } = logReturns(
      {
        seed: 8,
        startMs: START,
        underlyings: 45,
        tickIntervalMs,
        marketSpeed: marketSpeed / 90,
        jumpsPerDay: 0,
        ...QUIET,
      },
      3000,
    );
    const us = sim.universe().underlyings.filter((u) => u.simKind === 'equity');
    const corr = (a: number[], b: number[]) => {
      const ma = mean(a);
      const mb = mean(b);
      let sab = 0;
      let saa = 0;
      let sbb = 0;
      for (let i = 0; i < a.length; i++) {
        const da = (a[i] ?? 0) - ma;
        const db = (b[i] ?? 0) - mb;
        sab += da * db;
        saa += da * da;
        sbb += db * db;
      }
      return sab / Math.sqrt(saa * sbb);
    };
    let same = 0;
    let other = 0;
    let sumErr = 0;
    let pairs = 0;
    for (let i = 0; i < us.length; i++) {
      for (let j = i + 1; j < us.length; j++) {
        const a = us[i];
        const b = us[j];
        if (!a || !b) continue;
        const sameSector = a.sector === b.sector;
        const expected =
          a.marketLoading * b.marketLoading + (sameSector ? a.sectorLoading * b.sectorLoading : 0);
        const ra = returns.get(a.name) ?? [];
        const rb = returns.get(b.name) ?? [];
        const got = corr(ra, rb);
        const se = (1 - expected * expected) / Math.sqrt(ra.length);
        expect(Math.abs(got - expected), `${a.name}/${b.name}`).toBeLessThan(4.5 * se);
        sumErr += got - expected;
        pairs++;
        if (sameSector) same++;
        else other++;
      }
    }
    expect(same).toBeGreaterThan(5);
    expect(other).toBeGreaterThan(100);
    // No systematic bias across the pairs either.
    expect(Math.abs(sumErr / pairs)).toBeLessThan(0.02);
  });

  it('with jumps, log-returns match the compensated Merton jump-diffusion moments and have fat tails', () => {
    const jumpsPerDay = 0.02; // about 7 a year, so a quarter-year step holds ~1.8 jumps
    const { sim, returns, curves } = logReturns(
      {
        seed: 33,
        startMs: START,
        underlyings: 113,
        tickIntervalMs,
        marketSpeed,
        jumpsPerDay,
        marketLoading: 0,
        sectorLoading: 0,
        ...QUIET,
      },
      200,
    );
    const lambda = jumpsPerDay * 365;
    const k = Math.exp(JUMP_MEAN + 0.5 * JUMP_SD * JUMP_SD) - 1;
    const z: number[] = [];
    for (const u of sim
      .universe()
      .underlyings.filter((x) => x.simKind === 'equity' && x.discreteDividends === 0)) {
      const r = curves.get(u.currency) ?? 0;
      const m = (r - u.dividendYield - 0.5 * u.vol * u.vol - lambda * k + lambda * JUMP_MEAN) * dtYears;
      const sd = Math.sqrt((u.vol * u.vol + lambda * (JUMP_MEAN * JUMP_MEAN + JUMP_SD * JUMP_SD)) * dtYears);
      for (const x of returns.get(u.name) ?? []) z.push((x - m) / sd);
    }
    const n = z.length;
    expect(Math.abs(mean(z))).toBeLessThan(4 / Math.sqrt(n));
    // The fourth moment is above 3 (fat tails), so the SE of the mean square exceeds sqrt(2/N):
    // use the sample's own spread of z^2.
    const sq = z.map((x) => x * x);
    const m2 = mean(sq);
    const sdSq = Math.sqrt(mean(sq.map((x) => (x - m2) ** 2)));
    expect(Math.abs(m2 - 1)).toBeLessThan((4 * sdSq) / Math.sqrt(n));
    expect(mean(sq.map((x) => x * x))).toBeGreaterThan(3);
  });
});
