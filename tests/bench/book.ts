// The benchmark book that the engine and Kafka benchmarks share: 100 000 option positions over 500
// underlyings (about 5 000 distinct instruments: 5 strikes x call/put each), four desks of five
// books, one USD curve, a delta limit per underlying and a vega limit per desk. Invented data,
// deterministic (a fixed LCG), generated lazily so that a heap measure holds none of it.
import type { InputMsg } from '@keelson/shared-types';

export const UNDERLYINGS = 500;
export const INSTRUMENTS_PER_UNDERLYING = 10; // 5 strikes x call/put
export const POSITIONS = 100_000;
export const DESKS = ['HARBOUR', 'SUMMIT', 'LANTERN', 'MERIDIAN'];
export const BOOKS_PER_DESK = 5;
export const DAY = 86_400_000;

/** Deterministic uniform in [0, 1): the same book on every run. */
export function lcg(seed: number) {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 4294967296;
  };
}

export const iso = (ms: number) => new Date(ms).toISOString();
export const undName = (u: number) => `KX${String(u).padStart(3, '0')}`;
export const spot0 = (u: number) => 40 + (u % 160);

/** The book as contract messages, generated lazily so that the heap measure holds none of them. */
export function* bookMessages(startMs: number): Generator<InputMsg> {
  const ts = iso(startMs);
  yield {
    type: 'curve',
    currency: 'USD',
    ts,
    tenors: [0.25, 0.5, 1, 2, 5],
    zeroRates: [0.043, 0.042, 0.04, 0.038, 0.037],
  };
  for (let u = 0; u < UNDERLYINGS; u++) {
    const name = undName(u);
    const s = spot0(u);
    yield {
      type: 'underlying',
      underlying: name,
      kind: 'equity',
      currency: 'USD',
      dividendYield: (u % 5) * 0.005,
      dividends: [],
      ts,
    };
    yield {
      type: 'vol-surface',
      underlying: name,
      ts,
      expiries: [iso(startMs + 90 * DAY), iso(startMs + 365 * DAY), iso(startMs + 730 * DAY)],
      strikes: [0.7, 0.85, 1, 1.15, 1.3].map((k) => k * s),
      vols: [
        [0.34, 0.3, 0.27, 0.26, 0.26],
        [0.31, 0.28, 0.26, 0.25, 0.25],
        [0.29, 0.27, 0.25, 0.245, 0.245],
      ],
    };
    yield { type: 'spot', underlying: name, price: s, ts };
    yield {
      type: 'limit',
      limitId: `L-${name}-DELTA`,
      scope: { underlying: name },
      metric: 'delta',
      max: 1e7,
      min: -1e7,
      warnAt: 0.8,
      hysteresis: 0.05,
      ts,
    };
  }
  for (const desk of DESKS)
    yield {
      type: 'limit',
      limitId: `L-${desk}-VEGA`,
      scope: { desk },
      metric: 'vega',
      max: 5e8,
      min: -5e8,
      warnAt: 0.8,
      hysteresis: 0.05,
      ts,
    };
  const rnd = lcg(7);
  for (let j = 0; j < POSITIONS; j++) {
    const u = j % UNDERLYINGS;
    const k = Math.floor(j / UNDERLYINGS) % INSTRUMENTS_PER_UNDERLYING;
    const strike = spot0(u) * [0.9, 0.95, 1, 1.05, 1.1][k >> 1]!;
    const expiry = startMs + (30 + ((u * 7 + (k >> 1) * 53) % 700)) * DAY;
    const desk = DESKS[j % DESKS.length]!;
    const book = `${desk}-${1 + (Math.floor(j / DESKS.length) % BOOKS_PER_DESK)}`;
    yield {
      type: 'trade',
      tradeId: `T-${String(j).padStart(6, '0')}`,
      version: 1,
      action: 'new',
      ts,
      desk,
      book,
      underlying: undName(u),
      instrument: {
        kind: 'option',
        right: k % 2 ? 'put' : 'call',
        payoff: 'vanilla',
        strike,
        expiry: iso(expiry),
        multiplier: 100,
      },
      quantity: Math.round((rnd() - 0.5) * 100) || 1,
      price: 2,
    };
  }
}
