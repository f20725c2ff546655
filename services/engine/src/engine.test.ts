// One test per contract rule of /work/shared/contract-v1.md, through the engine's public API.
// Reference values: Hull, "Options, Futures, and Other Derivatives" (the S=42, K=40, r=10%,
// sigma=20%, T=0.5 example: call 4.76, put 0.81, N(d1)=0.7791; values from memory), and the npm
// `black-scholes` package (an independent implementation of the same formula) for the wiring.
import { describe, expect, it } from 'vitest';
import { createRequire } from 'node:module';
import { priceOption } from '@keelson/quant';
import type { AlertMsg, StaleFeedMsg } from '@keelson/shared-types';
import { ManualClock } from './clock.ts';
import { RiskEngine } from './engine.ts';
import type { EngineObserver } from './engine.ts';
import {
  DAY,
  T0,
  YEAR,
  acmeMarket,
  feed,
  flatCurve,
  flatSurface,
  iso,
  limit,
  msg,
  mustNode,
  nodeOf,
  spot,
  trade,
  underlying,
} from './test-support.ts';

// the package ships no types; its one function: blackScholes(s, k, t, v, r, 'call' | 'put')
const { blackScholes } = createRequire(import.meta.url)('black-scholes') as {
  blackScholes: (s: number, k: number, t: number, v: number, r: number, cp: 'call' | 'put') => number;
};

function engine(extra: Partial<ConstructorParameters<typeof RiskEngine>[0]> = {}): RiskEngine {
  return new RiskEngine({ clock: 'event', ...extra });
}

function hullMarket(): ReturnType<typeof acmeMarket> {
  return [underlying('ACME'), flatCurve('USD', 0.1), flatSurface('ACME', 0.2), spot('ACME', 42)];
}
const HALF_YEAR = T0 + YEAR / 2;

describe('valuation: the Hull example through the engine', () => {
  it('prices S=42 K=40 r=10% vol=20% T=0.5 at 4.76 per unit (call) and 0.81 (put), scaled by quantity x multiplier', () => {
    const e = engine();
    feed(e, hullMarket());
    feed(e, [
      trade({ id: 'C', strike: 40, expiryMs: HALF_YEAR, quantity: 10, multiplier: 100, price: 4.5 }),
      trade({ id: 'P', strike: 40, expiryMs: HALF_YEAR, right: 'put', quantity: 1, book: 'PUTS' }),
    ]);
    const c = mustNode(e, 'desk=ORCHARD/book=B1/underlying=ACME');
    expect(c.pv / 1000).toBeCloseTo(4.76, 2); // Hull
    expect(c.pv / 1000).toBeCloseTo(blackScholes(42, 40, 0.5, 0.2, 0.1, 'call'), 6); // npm black-scholes
    expect(c.delta! / 1000).toBeCloseTo(0.7791, 4); // Hull: N(d1) = N(0.7693)
    expect(c.pnl).toBeCloseTo(c.pv - 1000 * 4.5, 9);
    expect(c.cashDelta).toBeCloseTo(c.delta! * 42, 9);
    expect(c.cashGamma).toBeCloseTo((c.gamma! * 42 * 42) / 100, 9);
    const p = mustNode(e, 'desk=ORCHARD/book=PUTS/underlying=ACME');
    expect(p.pv).toBeCloseTo(0.81, 2); // Hull
    expect(p.pv).toBeCloseTo(blackScholes(42, 40, 0.5, 0.2, 0.1, 'put'), 6);
  });

  it('takes the vol off the surface by the contract rule (total variance between pillars)', () => {
    const e = engine();
    feed(e, [
      underlying('ACME'),
      flatCurve('USD', 0.1),
      spot('ACME', 42),
      msg({
        type: 'vol-surface',
        underlying: 'ACME',
        ts: iso(T0),
        expiries: [iso(T0 + YEAR / 4), iso(T0 + YEAR)],
        strikes: [30, 50],
        vols: [
          [0.3, 0.1],
          [0.4, 0.2],
        ],
      }),
      trade({ id: 'C', strike: 40, expiryMs: HALF_YEAR }),
    ]);
    // strike 40 is midway: 0.2 at the first pillar, 0.3 at the second; variance linear in tau
    const w = 0.2 * 0.2 * 0.25 + ((0.3 * 0.3 * 1 - 0.2 * 0.2 * 0.25) * (0.5 - 0.25)) / (1 - 0.25);
    const vol = Math.sqrt(w / 0.5);
    expect(mustNode(e, 'firm').pv).toBeCloseTo(blackScholes(42, 40, 0.5, vol, 0.1, 'call'), 6);
  });
});

describe('trade lifecycle', () => {
  it('applies a version only above the highest seen: late lower and equal versions are duplicates', () => {
    const e = engine();
    feed(e, hullMarket());
    expect(e.apply(trade({ id: 'T1', version: 1, quantity: 10 }), 's')).toBe('accepted');
    expect(e.apply(trade({ id: 'T1', version: 3, action: 'amend', quantity: 30 }), 's')).toBe('accepted');
    expect(e.apply(trade({ id: 'T1', version: 2, action: 'amend', quantity: 20 }), 's')).toBe('duplicate');
    expect(e.apply(trade({ id: 'T1', version: 3, action: 'amend', quantity: 30 }), 's')).toBe('duplicate');
    const one = engine();
    feed(one, hullMarket());
    feed(one, [trade({ id: 'X', quantity: 30 })]);
    expect(mustNode(e, 'firm').pv).toBeCloseTo(mustNode(one, 'firm').pv, 12);
    expect(mustNode(e, 'firm').positions).toBe(1);
  });

  it('treats an amend of an unknown trade as new', () => {
    const e = engine();
    feed(e, hullMarket());
    expect(e.apply(trade({ id: 'T9', version: 4, action: 'amend', quantity: 2 }), 's')).toBe('accepted');
    expect(mustNode(e, 'firm').positions).toBe(1);
  });

  it('records the version of a cancel for an unknown trade, so the late new is ignored', () => {
    const e = engine();
    feed(e, hullMarket());
    expect(e.apply(trade({ id: 'T2', version: 2, action: 'cancel' }), 's')).toBe('accepted');
    expect(e.apply(trade({ id: 'T2', version: 1 }), 's')).toBe('duplicate');
    expect(nodeOf(e, 'firm')).toBeUndefined();
    expect(e.stats().positions).toBe(0);
  });

  it('moves a trade between books: the old book publishes zeros once and is dropped', () => {
    const e = engine();
    feed(e, hullMarket());
    feed(e, [trade({ id: 'T1', book: 'B1', quantity: 5 })]);
    e.drain();
    feed(e, [trade({ id: 'T1', version: 2, action: 'amend', book: 'B2', quantity: 5 })]);
    const d = e.drain();
    const old = d.exposures.find((x) => x.nodeKey === 'desk=ORCHARD/book=B1');
    expect(old).toMatchObject({
      pv: 0,
      pnl: 0,
      vega: 0,
      positions: 0,
      unpriced: {},
      delta: null,
      gamma: null,
    });
    const oldU = d.exposures.find((x) => x.nodeKey === 'desk=ORCHARD/book=B1/underlying=ACME');
    expect(oldU).toMatchObject({ pv: 0, delta: 0, gamma: 0, positions: 0 });
    expect(d.exposures.map((x) => x.nodeKey)).toContain('desk=ORCHARD/book=B2');
    const keys = e.snapshot().map((x) => x.nodeKey);
    expect(keys).not.toContain('desk=ORCHARD/book=B1');
    expect(keys).toEqual([
      'desk=ORCHARD',
      'desk=ORCHARD/book=B2',
      'desk=ORCHARD/book=B2/underlying=ACME',
      'firm',
      'underlying=ACME',
    ]);
    // the firm did not move
    expect(mustNode(e, 'firm').positions).toBe(1);
    // nothing published twice for the same node in one drain, and in nodeKey order
    const all = d.exposures.map((x) => x.nodeKey);
    expect(all).toEqual([...new Set(all)].sort());
  });

  it('rejects an amend that changes the underlying, with a reason that says why, and keeps the trade', () => {
    const e = engine();
    feed(e, hullMarket());
    feed(e, [trade({ id: 'T1', quantity: 5 })]);
    const raw = JSON.stringify(trade({ id: 'T1', version: 2, action: 'amend', underlying: 'OTHER' }));
    expect(e.ingest(raw, 'trades partition 0 offset 7')).toBe('rejected');
    const [r] = e.drain().rejected;
    expect(r?.reason).toMatch(/^trade\.underlying may not change from ACME to OTHER/);
    expect(r).toMatchObject({ type: 'rejected', source: 'trades partition 0 offset 7', raw, ts: iso(T0) });
    expect(mustNode(e, 'underlying=ACME').positions).toBe(1);
    // the rejected version was not recorded: the same version with the right underlying applies
    expect(e.apply(trade({ id: 'T1', version: 2, action: 'amend', quantity: 7 }), 's')).toBe('accepted');
  });

  it('cancels: the node publishes once more with zeros and is dropped', () => {
    const e = engine();
    feed(e, hullMarket());
    feed(e, [trade({ id: 'T1', quantity: 5 })]);
    e.drain();
    feed(e, [trade({ id: 'T1', version: 2, action: 'cancel' })]);
    const d = e.drain();
    expect(d.exposures.map((x) => [x.nodeKey, x.positions, x.pv])).toEqual([
      ['desk=ORCHARD', 0, 0],
      ['desk=ORCHARD/book=B1', 0, 0],
      ['desk=ORCHARD/book=B1/underlying=ACME', 0, 0],
      ['firm', 0, 0],
      ['underlying=ACME', 0, 0],
    ]);
    expect(e.snapshot()).toEqual([]);
    expect(e.drain().exposures).toEqual([]);
  });

  it('publishes delta and gamma only on nodes that fix one underlying', () => {
    const e = engine();
    feed(e, hullMarket());
    feed(e, [trade({ id: 'T1' })]);
    for (const n of e.snapshot()) {
      const fixes = n.node.underlying !== undefined;
      expect(n.delta === null).toBe(!fixes);
      expect(n.gamma === null).toBe(!fixes);
    }
  });
});

describe('linear positions', () => {
  it('equity: pv = q m S, pnl = q m (S - price), delta = q m, other Greeks 0', () => {
    const e = engine();
    feed(e, [
      underlying('ACME'),
      spot('ACME', 42),
      trade({ id: 'L', linear: true, quantity: 3, multiplier: 10, price: 40 }),
    ]);
    expect(mustNode(e, 'underlying=ACME')).toMatchObject({
      pv: 1260,
      pnl: 60,
      delta: 30,
      cashDelta: 1260,
      gamma: 0,
      vega: 0,
      theta: 0,
      rho: 0,
      unpriced: {},
    });
  });

  it('future: pv = pnl = q m (F - price)', () => {
    const e = engine();
    feed(e, [
      underlying('RYEF', { kind: 'future' }),
      spot('RYEF', 510),
      trade({ id: 'F', underlying: 'RYEF', linear: true, quantity: -2, multiplier: 50, price: 500 }),
    ]);
    expect(mustNode(e, 'underlying=RYEF')).toMatchObject({
      pv: -1000,
      pnl: -1000,
      delta: -100,
      cashDelta: -51000,
    });
  });
});

describe('unpriced positions: reasons in precedence order, left out of the sums, never valued at zero', () => {
  it('names the first missing input', () => {
    const e = engine();
    feed(e, [trade({ id: 'R', underlying: 'GHOST' })]);
    expect(mustNode(e, 'firm').unpriced).toEqual({ 'no-reference': 1 });
    feed(e, [underlying('GHOST')]);
    expect(mustNode(e, 'firm').unpriced).toEqual({ 'no-spot': 1 });
    feed(e, [spot('GHOST', 50)]);
    expect(mustNode(e, 'firm').unpriced).toEqual({ 'no-curve': 1 });
    feed(e, [flatCurve('USD', 0.02)]);
    expect(mustNode(e, 'firm').unpriced).toEqual({ 'no-vol': 1 });
    feed(e, [flatSurface('GHOST', 0.3)]);
    expect(mustNode(e, 'firm').unpriced).toEqual({});
    expect(mustNode(e, 'firm').pv).toBeGreaterThan(0);
  });

  it('needs the conversion spot for a currency other than the reporting one (no-fx, last)', () => {
    const e = engine();
    feed(e, [
      underlying('BRIO', { currency: 'EUR' }),
      spot('BRIO', 20),
      trade({ id: 'E', underlying: 'BRIO', linear: true }),
    ]);
    expect(mustNode(e, 'firm')).toMatchObject({ unpriced: { 'no-fx': 1 }, pv: 0, positions: 1 });
  });

  it('an fx option needs the base currency curve too', () => {
    const e = engine();
    feed(e, [
      underlying('EURUSD', { kind: 'fx' }),
      spot('EURUSD', 1.1),
      flatCurve('USD', 0.04),
      flatSurface('EURUSD', 0.08),
      trade({ id: 'X', underlying: 'EURUSD', strike: 1.1 }),
    ]);
    expect(mustNode(e, 'firm').unpriced).toEqual({ 'no-curve': 1 });
    feed(e, [flatCurve('EUR', 0.02)]);
    expect(mustNode(e, 'firm').unpriced).toEqual({});
  });

  it('a linear position needs only reference data and a spot', () => {
    const e = engine();
    feed(e, [underlying('ACME'), spot('ACME', 10), trade({ id: 'L', linear: true, quantity: 2 })]);
    expect(mustNode(e, 'firm')).toMatchObject({ pv: 20, unpriced: {} });
  });

  it('keeps unpriced positions out of the sums but in the counts', () => {
    const e = engine();
    feed(e, hullMarket());
    feed(e, [
      trade({ id: 'OK', strike: 40, expiryMs: HALF_YEAR }),
      trade({ id: 'NOV', underlying: 'NOVOL', strike: 40 }),
    ]);
    feed(e, [underlying('NOVOL'), spot('NOVOL', 42)]);
    const firm = mustNode(e, 'firm');
    expect(firm.positions).toBe(2);
    expect(firm.unpriced).toEqual({ 'no-vol': 1 });
    expect(firm.pv).toBeCloseTo(blackScholes(42, 40, 0.5, 0.2, 0.1, 'call'), 6);
    expect(e.stats().unpriced).toEqual({ 'no-vol': 1 });
  });
});

describe('FX conversion into the reporting currency', () => {
  function brio(e: RiskEngine): void {
    feed(e, [
      underlying('BRIO', { currency: 'EUR' }),
      flatCurve('EUR', 0.03),
      flatSurface('BRIO', 0.25),
      spot('BRIO', 20),
      trade({ id: 'E', underlying: 'BRIO', strike: 20, quantity: 100 }),
      trade({ id: 'EL', underlying: 'BRIO', linear: true, quantity: 10, price: 19 }),
    ]);
  }

  it('multiplies by the pair CCYREP', () => {
    const e = engine();
    brio(e);
    const unit = priceOption({
      right: 'call',
      payoff: 'vanilla',
      spot: 20,
      strike: 20,
      tau: 0.5,
      vol: 0.25,
      rate: 0.03,
      carry: 0.03,
    });
    feed(e, [spot('EURUSD', 1.2)]);
    const n = mustNode(e, 'underlying=BRIO');
    expect(n.pv).toBeCloseTo((100 * unit.price + 10 * 20) * 1.2, 9);
    expect(n.pnl).toBeCloseTo((100 * unit.price + 10 * (20 - 19)) * 1.2, 9);
    expect(n.delta).toBeCloseTo(100 * unit.delta + 10, 9); // units of the underlying: not converted
    expect(n.vega).toBeCloseTo(100 * unit.vega * 1.2, 9);
    expect(n.currency).toBe('USD');
  });

  it('divides by the pair REPCCY', () => {
    const e = engine({ reportingCurrency: 'EUR' });
    feed(e, [
      underlying('ACME'),
      spot('ACME', 30),
      trade({ id: 'U', linear: true, quantity: 4 }),
      spot('EURUSD', 1.25),
    ]);
    expect(mustNode(e, 'firm')).toMatchObject({ pv: (4 * 30) / 1.25, currency: 'EUR' });
  });

  it('rescales every position in the currency on a tick of the pair, with no option revaluation', () => {
    const counts: number[] = [];
    const e = engine({ observer: { revaluations: (n) => counts.push(n) } });
    brio(e);
    feed(e, [spot('EURUSD', 1.2)]);
    const before = mustNode(e, 'underlying=BRIO');
    e.drain();
    counts.length = 0;
    feed(e, [spot('EURUSD', 1.5)]);
    expect(counts).toEqual([]);
    const after = mustNode(e, 'underlying=BRIO');
    expect(after.pv).toBeCloseTo((before.pv * 1.5) / 1.2, 9);
    expect(after.cashDelta).toBeCloseTo((before.cashDelta * 1.5) / 1.2, 9);
    expect(after.delta).toBe(before.delta);
    expect(e.drain().exposures.map((x) => x.nodeKey)).toContain('firm');
  });
});

describe('models', () => {
  it('fx options: Garman-Kohlhagen with b = r_quote - r_base, rho on the quote curve', () => {
    const e = engine();
    feed(e, [
      underlying('EURUSD', { kind: 'fx' }),
      spot('EURUSD', 1.1),
      flatCurve('USD', 0.04),
      flatCurve('EUR', 0.02),
      flatSurface('EURUSD', 0.08),
      trade({ id: 'X', underlying: 'EURUSD', strike: 1.12, quantity: 1e6 }),
    ]);
    const g = priceOption({
      right: 'call',
      payoff: 'vanilla',
      spot: 1.1,
      strike: 1.12,
      tau: 0.5,
      vol: 0.08,
      rate: 0.04,
      carry: 0.02,
    });
    expect(mustNode(e, 'firm').pv).toBeCloseTo(1e6 * g.price, 6);
    expect(mustNode(e, 'firm').rho).toBeCloseTo(1e6 * g.rho, 6);
  });

  it('futures options: Black-76 (carry 0) on the futures price', () => {
    const e = engine();
    feed(e, [
      underlying('RYEF', { kind: 'future' }),
      spot('RYEF', 500),
      flatCurve('USD', 0.05),
      flatSurface('RYEF', 0.3),
      trade({ id: 'F', underlying: 'RYEF', strike: 480, right: 'put' }),
    ]);
    const g = priceOption({
      right: 'put',
      payoff: 'vanilla',
      spot: 500,
      strike: 480,
      tau: 0.5,
      vol: 0.3,
      rate: 0.05,
      carry: 0,
      rhoCarry: false,
    });
    const n = mustNode(e, 'firm');
    expect(n.pv).toBeCloseTo(g.price, 9);
    // Black-76 with b fixed: rho = -T V (a known property of the model), per 1%
    expect(n.rho).toBeCloseTo(-0.5 * g.price * 0.01, 9);
  });

  it('equity discrete dividends: escrowed S*, and rho moves the dividend PVs with the curve', () => {
    const ex = T0 + YEAR / 4;
    const divs = {
      dividends: [
        { exDate: iso(ex), amount: 2 },
        { exDate: iso(T0 + YEAR), amount: 5 },
      ],
      dividendYield: 0.01,
    };
    const mk = (rate: number): RiskEngine => {
      const e = engine();
      feed(e, [
        underlying('ACME', divs),
        flatCurve('USD', rate),
        flatSurface('ACME', 0.2),
        spot('ACME', 42),
        trade({ id: 'C', strike: 40, expiryMs: HALF_YEAR }),
      ]);
      return e;
    };
    const e = mk(0.1);
    const sStar = 42 - 2 * Math.exp(-0.1 * 0.25); // the dividend after expiry does not count
    const g = priceOption({
      right: 'call',
      payoff: 'vanilla',
      spot: sStar,
      strike: 40,
      tau: 0.5,
      vol: 0.2,
      rate: 0.1,
      carry: 0.09,
    });
    const n = mustNode(e, 'firm');
    expect(n.pv).toBeCloseTo(g.price, 12);
    expect(n.cashDelta).toBeCloseTo(g.delta * 42, 12); // the quoted spot, not S*
    // central difference of the engine's own pv under a parallel curve shift, per 1%
    const h = 1e-5;
    const fd = ((mustNode(mk(0.1 + h), 'firm').pv - mustNode(mk(0.1 - h), 'firm').pv) / (2 * h)) * 0.01;
    expect(n.rho).toBeCloseTo(fd, 7);
    expect(Math.abs(n.rho - g.rho)).toBeGreaterThan(1e-4); // the dividend term is really there
  });

  it('expired options: intrinsic at the current spot, zero Greeks, in 0-30d', () => {
    const clock = new ManualClock(T0);
    const e = new RiskEngine({ clock });
    feed(e, [
      ...acmeMarket(),
      limit({ limitId: 'L-SHORT', scope: { tenor: '0-30d' }, metric: 'vega', max: 1e9 }),
      trade({ id: 'C', strike: 90, expiryMs: T0 + DAY, quantity: 3 }),
      trade({ id: 'D', strike: 95, expiryMs: T0 + DAY, payoff: 'cash-digital', cashAmount: 10, book: 'DIG' }),
    ]);
    clock.set(T0 + 2 * DAY);
    feed(e, [spot('ACME', 101, T0 + 2 * DAY)]);
    const c = mustNode(e, 'desk=ORCHARD/book=B1/underlying=ACME');
    expect(c).toMatchObject({ pv: 33, delta: 0, gamma: 0, vega: 0, theta: 0, rho: 0, cashDelta: 0 });
    expect(mustNode(e, 'desk=ORCHARD/book=DIG/underlying=ACME').pv).toBe(10);
    expect(mustNode(e, 'tenor=0-30d').positions).toBe(2);
  });
});

describe('tenor buckets', () => {
  it('moves a position through the buckets as time passes, by whole days to expiry', () => {
    const clock = new ManualClock(T0);
    const e = new RiskEngine({ clock });
    feed(e, [
      ...acmeMarket(),
      limit({ limitId: 'L-0', scope: { tenor: '0-30d' }, metric: 'vega', max: 1e9 }),
      limit({ limitId: 'L-31', scope: { tenor: '31-90d' }, metric: 'vega', max: 1e9 }),
      trade({ id: 'C', expiryMs: T0 + 31 * DAY }),
      trade({ id: 'L', linear: true }),
    ]);
    // exactly 31 days to expiry: 31-90d; linear positions carry no tenor
    expect(mustNode(e, 'tenor=31-90d').positions).toBe(1);
    expect(mustNode(e, 'tenor=0-30d').positions).toBe(0);
    clock.set(T0 + 1); // 30 days and 23:59:59.999: 30 whole days
    e.revalueAll();
    expect(mustNode(e, 'tenor=0-30d').positions).toBe(1);
    const old = mustNode(e, 'tenor=31-90d');
    expect(old).toMatchObject({ positions: 0, vega: 0 });
    expect(mustNode(e, 'tenor=0-30d').vega).toBeCloseTo(mustNode(e, 'firm').vega, 12);
  });

  it('keeps 0-30d, 31-90d, 91-180d, 181-365d, 366d+ at their day boundaries', () => {
    const e = engine();
    const edges: [number, string][] = [
      [30, '0-30d'],
      [90, '31-90d'],
      [91, '91-180d'],
      [180, '91-180d'],
      [181, '181-365d'],
      [365, '181-365d'],
      [366, '366d+'],
    ];
    feed(e, acmeMarket());
    for (const [, bucket] of edges)
      feed(e, [limit({ limitId: `L-${bucket}`, scope: { tenor: bucket }, metric: 'vega', max: 1e9 })]);
    edges.forEach(([days], i) => feed(e, [trade({ id: `T${i}`, expiryMs: T0 + days * DAY })]));
    const count = (b: string): number => mustNode(e, `tenor=${b}`).positions;
    expect(['0-30d', '31-90d', '91-180d', '181-365d', '366d+'].map(count)).toEqual([1, 1, 2, 2, 1]);
  });
});

describe('stale feeds', () => {
  it('raises when the last spot gets older than the threshold at valuation time, clears when a spot resumes', () => {
    const e = engine({ staleAfterMs: 5000 });
    feed(e, [...acmeMarket(), trade({ id: 'C' }), underlying('ZED'), spot('ZED', 1)]);
    e.drain();
    feed(e, [spot('ZED', 1, T0 + 5000)]); // exactly 5 s old: not older than the threshold
    expect(e.drain().alerts).toEqual([]);
    feed(e, [spot('ZED', 1, T0 + 5001)]);
    const raised = e.drain();
    expect(raised.alerts).toEqual([
      { type: 'stale-feed', underlying: 'ACME', state: 'raised', lastTick: iso(T0), ts: iso(T0 + 5001) },
    ] satisfies StaleFeedMsg[]);
    expect(mustNode(e, 'underlying=ACME').stale).toBe(true);
    expect(mustNode(e, 'firm').stale).toBe(true);
    expect(raised.exposures.find((x) => x.nodeKey === 'firm')?.stale).toBe(true);
    expect(e.feeds()).toEqual([
      { underlying: 'ACME', lastTickMs: T0, stale: true },
      { underlying: 'ZED', lastTickMs: T0 + 5001, stale: false },
    ]);
    feed(e, [spot('ACME', 100, T0 + 6000)]);
    expect(e.drain().alerts).toEqual([
      {
        type: 'stale-feed',
        underlying: 'ACME',
        state: 'cleared',
        lastTick: iso(T0 + 6000),
        ts: iso(T0 + 6000),
      },
    ]);
    expect(mustNode(e, 'firm').stale).toBe(false);
  });

  it('after a rebuild, announces what the rebuild passed over silently and nothing that was already said', () => {
    // A rebuild drops its outputs: ACME went stale during it, ZED is fresh, BOLT was raised before
    // and is fresh again, QUIX was raised before and is still stale. (Contract: one stale-feed event
    // per transition; the gap rule is ours, DECISIONS.md.)
    const e = engine({ staleAfterMs: 5000 });
    feed(e, [...acmeMarket(), underlying('QUIX'), spot('QUIX', 1), underlying('BOLT'), underlying('ZED')]);
    feed(e, [spot('BOLT', 1, T0 + 9000), spot('ZED', 1, T0 + 9000)]);
    e.drain(); // the rebuild's outputs, dropped
    const published = new Map<string, 'raised' | 'cleared'>([
      ['BOLT', 'raised'],
      ['QUIX', 'raised'],
      ['ZED', 'cleared'],
    ]);
    const want: StaleFeedMsg[] = [
      { type: 'stale-feed', underlying: 'ACME', state: 'raised', lastTick: iso(T0), ts: iso(T0 + 9000) },
      {
        type: 'stale-feed',
        underlying: 'BOLT',
        state: 'cleared',
        lastTick: iso(T0 + 9000),
        ts: iso(T0 + 9000),
      },
    ];
    expect(e.reconcileFeeds(published)).toEqual(want);
    expect(e.drain().alerts).toEqual(want);
    // agreed now: a second reconciliation against the updated record says nothing
    published.set('ACME', 'raised').set('BOLT', 'cleared');
    expect(e.reconcileFeeds(published)).toEqual([]);
    // and the next live transition follows on from what was announced
    feed(e, [spot('ACME', 100, T0 + 9500)]);
    expect(e.drain().alerts.map((a) => `${a.type === 'stale-feed' ? a.underlying : ''} ${a.state}`)).toEqual([
      'ACME cleared',
    ]);
  });

  it('ignores a spot older than the one held (out of order on its key)', () => {
    const e = engine();
    feed(e, [underlying('ACME'), spot('ACME', 10, T0 + 10), trade({ id: 'L', linear: true })]);
    expect(e.apply(spot('ACME', 99, T0 + 5), 's')).toBe('duplicate');
    expect(mustNode(e, 'firm').pv).toBe(10);
  });
});

describe('limits on nodes', () => {
  it('checks a limit when it arrives, and after every input that changes its node', () => {
    const alerts: AlertMsg[] = [];
    const e = engine({ observer: { alert: (a) => alerts.push(a) } });
    feed(e, [underlying('ACME'), spot('ACME', 100), trade({ id: 'L', linear: true, quantity: 900 })]);
    feed(e, [limit({ limitId: 'L-D', scope: { underlying: 'ACME' }, metric: 'delta', max: 1000 })]);
    expect(e.drain().alerts).toEqual([
      expect.objectContaining({
        alertId: 'L-D#1',
        state: 'raised',
        severity: 'warning',
        value: 900,
        utilization: 0.9,
        bound: 1000,
        nodeKey: 'underlying=ACME',
      }),
    ]);
    feed(e, [trade({ id: 'L', version: 2, action: 'amend', linear: true, quantity: 1000 })]);
    expect(e.drain().alerts.map((a) => (a as AlertMsg).state)).toEqual(['escalated']);
    feed(e, [trade({ id: 'L', version: 3, action: 'amend', linear: true, quantity: 950 })]);
    expect(e.drain().alerts).toEqual([]);
    feed(e, [trade({ id: 'L', version: 4, action: 'amend', linear: true, quantity: 949 })]);
    expect(e.drain().alerts.map((a) => (a as AlertMsg).state)).toEqual(['eased']);
    feed(e, [trade({ id: 'L', version: 5, action: 'cancel' })]);
    expect(e.drain().alerts).toEqual([
      expect.objectContaining({ state: 'cleared', alertId: 'L-D#1', value: 0 }),
    ]);
    expect(alerts.length).toBe(4);
  });

  it('publishes the alerts of one input in limitId order', () => {
    const e = engine();
    feed(e, [
      underlying('ACME'),
      spot('ACME', 100),
      trade({ id: 'L', linear: true, quantity: 1 }),
      limit({ limitId: 'Z-FIRM', scope: {}, metric: 'pv', max: 1000 }),
      limit({ limitId: 'A-ACME', scope: { underlying: 'ACME' }, metric: 'cashDelta', max: 1000 }),
      limit({ limitId: 'M-BOOK', scope: { desk: 'ORCHARD', book: 'B1' }, metric: 'pv', max: 1000 }),
    ]);
    e.drain();
    feed(e, [spot('ACME', 2000)]);
    expect(e.drain().alerts.map((a) => (a as AlertMsg).limitId)).toEqual(['A-ACME', 'M-BOOK', 'Z-FIRM']);
  });

  it('keeps the level through a replacement and rechecks it at once; removal clears the open alert', () => {
    const e = engine();
    feed(e, [underlying('ACME'), spot('ACME', 100), trade({ id: 'L', linear: true, quantity: 1 })]);
    feed(e, [limit({ limitId: 'L1', scope: {}, metric: 'pv', max: 90 })]);
    expect(e.drain().alerts).toEqual([expect.objectContaining({ state: 'raised', severity: 'breach' })]);
    feed(e, [limit({ limitId: 'L1', scope: {}, metric: 'pv', max: 104 })]); // 0.96: still breach
    expect(e.drain().alerts).toEqual([]);
    feed(e, [limit({ limitId: 'L1', scope: {}, metric: 'pv', max: 120 })]); // 0.833: eases, same episode
    expect(e.drain().alerts).toEqual([
      expect.objectContaining({ state: 'eased', alertId: 'L1#1', previous: 'breach' }),
    ]);
    expect(e.openAlerts().map((a) => a.alertId)).toEqual(['L1#1']);
    feed(e, [msg({ type: 'limit-remove', limitId: 'L1', ts: iso(T0) })]);
    expect(e.drain().alerts).toEqual([
      expect.objectContaining({ state: 'cleared', severity: 'ok', alertId: 'L1#1' }),
    ]);
    expect(e.openAlerts()).toEqual([]);
    expect(e.apply(msg({ type: 'limit-remove', limitId: 'L1', ts: iso(T0) }), 's')).toBe('duplicate');
  });

  it('keeps a node that a limit names even without positions (zeros), and drops it when the limit goes', () => {
    const e = engine();
    feed(e, [
      limit({ limitId: 'L-V', scope: { desk: 'ORCHARD', underlying: 'ACME' }, metric: 'vega', max: 10 }),
    ]);
    expect(e.snapshot()).toEqual([
      expect.objectContaining({ nodeKey: 'desk=ORCHARD/underlying=ACME', positions: 0, vega: 0, delta: 0 }),
    ]);
    feed(e, [...acmeMarket(), trade({ id: 'C', quantity: 1000 })]);
    const n = mustNode(e, 'desk=ORCHARD/underlying=ACME');
    expect(n.vega).toBeCloseTo(mustNode(e, 'firm').vega, 12);
    expect(e.openAlerts()).toHaveLength(1);
    e.drain();
    feed(e, [msg({ type: 'limit-remove', limitId: 'L-V', ts: iso(T0) })]);
    const d = e.drain();
    expect(d.exposures).toEqual([
      expect.objectContaining({ nodeKey: 'desk=ORCHARD/underlying=ACME', positions: 0, vega: 0 }),
    ]);
    expect(nodeOf(e, 'desk=ORCHARD/underlying=ACME')).toBeUndefined();
  });

  it('fills a scope named after its positions exist (book alone, any desk)', () => {
    const e = engine();
    feed(e, [
      ...acmeMarket(),
      trade({ id: 'A', desk: 'ORCHARD', book: 'SHARED' }),
      trade({ id: 'B', desk: 'QUARRY', book: 'SHARED' }),
      trade({ id: 'C', desk: 'QUARRY', book: 'OTHER' }),
    ]);
    feed(e, [limit({ limitId: 'L-S', scope: { book: 'SHARED' }, metric: 'pv', max: 1e9 })]);
    const s = mustNode(e, 'book=SHARED');
    expect(s.positions).toBe(2);
    expect(s.pv).toBeCloseTo((mustNode(e, 'firm').pv * 2) / 3, 9);
  });
});

describe('incremental revaluation', () => {
  function counting(): { e: RiskEngine; revals: number[]; changed: number[] } {
    const revals: number[] = [];
    const changed: number[] = [];
    const observer: EngineObserver = {
      revaluations: (n) => revals.push(n),
      exposuresChanged: (n) => changed.push(n),
    };
    return { e: engine({ observer }), revals, changed };
  }

  it('a spot revalues only its underlying; a curve only its currency; a trade only its instrument', () => {
    const { e, revals } = counting();
    feed(e, [
      ...acmeMarket(),
      underlying('BRIO', { currency: 'EUR' }),
      flatCurve('EUR', 0.02),
      flatSurface('BRIO', 0.3),
      spot('BRIO', 20),
      spot('EURUSD', 1.1),
    ]);
    for (const k of [90, 100, 110])
      feed(e, [trade({ id: `A${k}`, strike: k }), trade({ id: `A${k}b`, strike: k, book: 'B2' })]);
    for (const k of [18, 22]) feed(e, [trade({ id: `B${k}`, underlying: 'BRIO', strike: k })]);
    revals.length = 0;
    feed(e, [spot('ACME', 101, T0 + 1)]);
    expect(revals).toEqual([3]); // three instruments, six trades
    revals.length = 0;
    feed(e, [flatCurve('EUR', 0.025, T0 + 2)]);
    expect(revals).toEqual([2]);
    revals.length = 0;
    feed(e, [trade({ id: 'A90c', strike: 90, book: 'B3', ts: T0 + 3 })]);
    expect(revals).toEqual([1]);
    revals.length = 0;
    feed(e, [flatSurface('BRIO', 0.31, T0 + 4)]);
    expect(revals).toEqual([2]);
  });

  it('a booking at the time its instrument was last valued prices nothing and moves only its position', () => {
    const { e, revals } = counting();
    feed(e, [...hullMarket(), trade({ id: 'A', strike: 40, expiryMs: HALF_YEAR, book: 'B1' })]);
    revals.length = 0;
    e.drain();
    feed(e, [trade({ id: 'B', strike: 40, expiryMs: HALF_YEAR, book: 'B2', quantity: 2 })]);
    expect(revals).toEqual([]);
    expect(e.drain().exposures.map((x) => x.nodeKey)).toEqual([
      'desk=ORCHARD',
      'desk=ORCHARD/book=B2',
      'desk=ORCHARD/book=B2/underlying=ACME',
      'firm',
      'underlying=ACME',
    ]);
    expect(mustNode(e, 'desk=ORCHARD/book=B2').pv).toBeCloseTo(
      2 * blackScholes(42, 40, 0.5, 0.2, 0.1, 'call'),
      6,
    );
  });

  it('a spot tick of one underlying changes only the nodes holding it', () => {
    const { e } = counting();
    feed(e, [
      ...acmeMarket(),
      underlying('ZED'),
      spot('ZED', 5),
      trade({ id: 'A' }),
      trade({ id: 'Z', underlying: 'ZED', linear: true, desk: 'QUARRY' }),
    ]);
    e.drain();
    feed(e, [spot('ZED', 6, T0 + 1)]);
    expect(e.drain().exposures.map((x) => x.nodeKey)).toEqual([
      'desk=QUARRY',
      'desk=QUARRY/book=B1',
      'desk=QUARRY/book=B1/underlying=ZED',
      'firm',
      'underlying=ZED',
    ]);
  });
});

describe('inputs', () => {
  it('rejects undecodable input with its source, raw text and the current tape time', () => {
    const e = engine();
    feed(e, [spot('ACME', 1, T0 + 7)]);
    expect(
      e.ingest(
        '{"type":"spot","underlying":"ACME","price":-1,"ts":"2026-01-05T00:00:00Z"}',
        'tape.jsonl line 2',
      ),
    ).toBe('rejected');
    expect(e.ingest('not json', 'tape.jsonl line 3')).toBe('rejected');
    const r = e.drain().rejected;
    expect(r.map((x) => [x.source, x.ts])).toEqual([
      ['tape.jsonl line 2', iso(T0 + 7)],
      ['tape.jsonl line 3', iso(T0 + 7)],
    ]);
    expect(r[0]?.reason).toBe('spot.price must be > 0');
  });

  it('moves event time to the largest validated ts, duplicates included, rejected lines not', () => {
    const e = engine();
    feed(e, [trade({ id: 'T', ts: T0 + 50 }), trade({ id: 'T', ts: T0 + 100 })]);
    expect(e.now).toBe(T0 + 100);
    e.ingest(JSON.stringify({ ...trade({ id: 'Q', ts: T0 + 500 }), underlying: '' }), 'x');
    expect(e.now).toBe(T0 + 100);
    feed(e, [spot('ACME', 1, T0 + 20)]);
    expect(e.now).toBe(T0 + 100);
  });
});

describe('observer and stats', () => {
  it('reports every input with its type and outcome, revaluations and alerts', () => {
    const inputs: string[] = [];
    const alerts: string[] = [];
    const stale: string[] = [];
    const rejected: string[] = [];
    const e = engine({
      observer: {
        input: (t, o) => inputs.push(`${t}:${o}`),
        alert: (a) => alerts.push(a.alertId),
        staleFeed: (s) => stale.push(`${s.underlying}:${s.state}`),
        rejected: (r) => rejected.push(r.source),
      },
    });
    feed(e, [
      underlying('ACME'),
      spot('ACME', 100),
      trade({ id: 'L', linear: true, quantity: 10 }),
      trade({ id: 'L', linear: true, quantity: 10 }),
    ]);
    feed(e, [limit({ limitId: 'L1', scope: {}, metric: 'pv', max: 500 })]);
    e.ingest('{"type":"spot"}', 'r1');
    e.ingest('}{', 'r2');
    feed(e, [underlying('ZED', {}, T0 + 6000)]);
    expect(inputs).toEqual([
      'underlying:accepted',
      'spot:accepted',
      'trade:accepted',
      'trade:duplicate',
      'limit:accepted',
      'spot:rejected',
      'unknown:rejected',
      'underlying:accepted',
    ]);
    expect(alerts).toEqual(['L1#1']);
    expect(stale).toEqual(['ACME:raised']);
    expect(rejected).toEqual(['r1', 'r2']);
    expect(e.stats()).toEqual({
      positions: 1,
      instruments: 1,
      unpriced: {},
      revaluations: 1,
      valuationMs: T0 + 6000,
    });
    expect(e.utilizations()).toEqual([{ limitId: 'L1', utilization: 2 }]);
    expect(e.limits()).toEqual([
      {
        limitId: 'L1',
        nodeKey: 'firm',
        metric: 'pv',
        max: 500,
        warnAt: 0.8,
        hysteresis: 0.05,
        value: 1000,
        utilization: 2,
        level: 'breach',
      },
    ]);
  });
});

describe('a run of spots applied as one move (ingestSpots)', () => {
  // A firm that is long one ACME share and short one BRIO share, both at 100: flat, pv 0. Both
  // rise 10%. One tick at a time, the firm is +10 between the two ticks; as one move it stays 0.
  function flatFirm(): RiskEngine {
    const e = engine();
    feed(e, [
      underlying('ACME'),
      underlying('BRIO'),
      spot('ACME', 100),
      spot('BRIO', 100),
      trade({ id: 'LONG', linear: true, quantity: 1 }),
      trade({ id: 'SHORT', underlying: 'BRIO', linear: true, quantity: -1 }),
      limit({ limitId: 'L-FIRM', scope: {}, metric: 'pv', max: 5 }),
    ]);
    e.drain();
    return e;
  }
  const move = [spot('ACME', 110, T0 + 1000), spot('BRIO', 110, T0 + 1000)].map((m, i) => ({
    raw: JSON.stringify(m),
    source: `spots partition 0 offset ${i}`,
  }));

  it('checks limits after the run, not in the part-moved state between its ticks', () => {
    const oneByOne = flatFirm();
    for (const m of move) oneByOne.ingest(m.raw, m.source);
    // per tick: raised when ACME has moved and BRIO not yet, cleared when BRIO follows
    expect(oneByOne.drain().alerts.map((a) => (a as AlertMsg).state)).toEqual(['raised', 'cleared']);

    const grouped = flatFirm();
    expect(grouped.ingestSpots(move)).toEqual(['accepted', 'accepted']);
    const out = grouped.drain();
    expect(out.alerts).toEqual([]);
    const firm = out.exposures.find((x) => x.nodeKey === 'firm');
    expect(firm?.pv).toBeCloseTo(0, 12);
    // the same end state as one by one
    expect(grouped.snapshot()).toEqual(oneByOne.snapshot());
  });

  it('raises a breach that the end of the run shows, once, valued at the run', () => {
    const e = flatFirm();
    e.ingestSpots([move[0]!, { raw: JSON.stringify(spot('BRIO', 100, T0 + 1000)), source: 's' }]);
    expect(e.drain().alerts).toEqual([
      expect.objectContaining({ limitId: 'L-FIRM', state: 'raised', severity: 'breach', value: 10 }),
    ]);
  });

  it('rejects a bad record inside the run and applies a non-spot on its own, in order', () => {
    const e = flatFirm();
    const outcomes = e.ingestSpots([
      move[0]!,
      { raw: '{"type":"spot","underlying":"BRIO"}', source: 'spots partition 0 offset 7' },
      {
        raw: JSON.stringify(limit({ limitId: 'L-FIRM', scope: {}, metric: 'pv', max: 50 }, T0 + 1000)),
        source: 'l',
      },
      move[1]!,
    ]);
    expect(outcomes).toEqual(['accepted', 'rejected', 'accepted', 'accepted']);
    const out = e.drain();
    expect(out.rejected.map((r) => r.source)).toEqual(['spots partition 0 offset 7']);
    // ACME alone moved the firm to +10 (a breach of max 5), checked when the limit input ended the
    // run; the new max of 50 is checked at once (10 is a fifth of it): the episode clears
    expect(out.alerts.map((a) => (a as AlertMsg).state)).toEqual(['raised', 'cleared']);
  });
});
