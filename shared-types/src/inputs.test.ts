/**
 * Every input message of contract v1: the contract's own examples must pass (source:
 * /work/shared/contract-v1.md, copied in ../CONTRACT.md), and each domain rule written there must
 * reject with a reason that names the message type and the field, in the style of the
 * contract's example `spot.price must be > 0`.
 */
import { describe, expect, it } from 'vitest';
import { decodeInput, validateInput } from './decode.ts';

const TS = '2026-03-02T14:30:00.125Z';

function ok(obj: object) {
  const r = validateInput(obj);
  if (!r.ok) throw new Error(`expected valid, got: ${r.reason}`);
  return r.msg;
}
function reason(obj: unknown): string {
  const r = validateInput(obj);
  if (r.ok) throw new Error(`expected rejection of ${JSON.stringify(obj)}`);
  return r.reason;
}

// ---- the contract's examples, with "..." timestamps filled in
const underlyingEx = {
  type: 'underlying',
  underlying: 'NIMBUS',
  kind: 'equity',
  currency: 'USD',
  dividendYield: 0.012,
  dividends: [{ exDate: '2026-05-14T00:00:00Z', amount: 0.45 }],
  ts: TS,
};
const spotEx = { type: 'spot', underlying: 'NIMBUS', price: 101.25, ts: '2026-03-02T14:30:00.125Z' };
const surfaceEx = {
  type: 'vol-surface',
  underlying: 'NIMBUS',
  ts: TS,
  expiries: ['2026-03-20T20:00:00Z', '2026-06-19T20:00:00Z'],
  strikes: [80, 90, 100, 110, 120],
  vols: [
    [0.31, 0.28, 0.26, 0.25, 0.25],
    [0.29, 0.27, 0.255, 0.245, 0.24],
  ],
};
const curveEx = {
  type: 'curve',
  currency: 'USD',
  ts: TS,
  tenors: [0.25, 0.5, 1, 2, 5],
  zeroRates: [0.043, 0.042, 0.04, 0.038, 0.037],
};
const tradeEx = {
  type: 'trade',
  tradeId: 'T-000017',
  version: 1,
  action: 'new',
  ts: TS,
  desk: 'VOLATILITY',
  book: 'INDEX-1',
  underlying: 'NIMBUS',
  instrument: {
    kind: 'option',
    right: 'call',
    payoff: 'vanilla',
    strike: 100,
    expiry: '2026-06-19T20:00:00Z',
    multiplier: 100,
  },
  quantity: -25,
  price: 4.2,
};
const limitEx = {
  type: 'limit',
  limitId: 'L-VOL-NIMBUS-VEGA',
  scope: { desk: 'VOLATILITY', underlying: 'NIMBUS' },
  metric: 'vega',
  max: 250000,
  min: -250000,
  warnAt: 0.8,
  hysteresis: 0.05,
  ts: TS,
};

describe('decodeInput', () => {
  it('parses a raw line and says so when it is not JSON', () => {
    const r = decodeInput(JSON.stringify(spotEx));
    expect(r).toEqual({ ok: true, msg: spotEx });
    const bad = decodeInput('{"type":"spot",');
    expect(bad.ok).toBe(false);
    if (!bad.ok) expect(bad.reason).toMatch(/^invalid JSON: /);
    const empty = decodeInput('');
    expect(empty.ok).toBe(false);
    if (!empty.ok) expect(empty.reason).toMatch(/^invalid JSON: /);
  });

  it('never throws, whatever it is given', () => {
    for (const raw of [
      'null',
      '42',
      '"spot"',
      '[]',
      '{}',
      '{"type":7}',
      '\u0000',
      '{"type":"trade","instrument":null}',
    ]) {
      expect(() => decodeInput(raw)).not.toThrow();
      expect(decodeInput(raw).ok).toBe(false);
    }
    const hostile = {
      type: 'spot',
      underlying: 'X',
      ts: TS,
      get price(): number {
        throw new Error('boom');
      },
    };
    expect(validateInput(hostile)).toEqual({ ok: false, reason: 'spot could not be validated: Error: boom' });
  });

  it('names the allowed types when the type is unknown or missing', () => {
    const list = 'underlying, spot, vol-surface, curve, trade, limit, limit-remove';
    expect(reason({ type: 'quote', price: 1 })).toBe(`type must be one of ${list}`);
    expect(reason({ price: 1 })).toBe(`type is required; type must be one of ${list}`);
    expect(reason([spotEx])).toBe('message must be a JSON object');
    expect(reason(null)).toBe('message must be a JSON object');
  });

  it('ignores unknown extra fields (forward compatibility) and drops them from the result', () => {
    const m = ok({ ...spotEx, venue: 'XNIM', extra: { nested: true } });
    expect(m).toEqual(spotEx);
  });

  it('reports a few problems joined with "; ", not a flood', () => {
    const r = reason({ type: 'spot', underlying: 7, price: 'x', ts: 'now', a: 1 });
    expect(r).toBe(
      'spot.underlying must be a string; spot.price must be a number; ' +
        'spot.ts must be an ISO-8601 UTC timestamp with Z, like 2026-03-02T14:30:00.125Z',
    );
    const many = reason({
      ...surfaceEx,
      vols: [
        [0, 0, 0, 0, 0],
        [0, 0, 0, 0, 0],
      ],
    });
    expect(many.split('; ')).toHaveLength(3);
  });
});

describe('underlying', () => {
  it('accepts the contract example and applies defaults', () => {
    expect(ok(underlyingEx)).toEqual(underlyingEx);
    expect(ok({ type: 'underlying', underlying: 'NIMBUS', kind: 'equity', currency: 'USD', ts: TS })).toEqual(
      {
        type: 'underlying',
        underlying: 'NIMBUS',
        kind: 'equity',
        currency: 'USD',
        dividendYield: 0,
        dividends: [],
        ts: TS,
      },
    );
    expect(
      ok({ type: 'underlying', underlying: 'EURUSD', kind: 'fx', currency: 'USD', ts: TS }),
    ).toMatchObject({ kind: 'fx' });
    expect(
      ok({ type: 'underlying', underlying: 'NIMFUT-JUN26', kind: 'future', currency: 'USD', ts: TS }),
    ).toMatchObject({ kind: 'future' });
  });

  it('sorts dividends by exDate', () => {
    const m = ok({
      ...underlyingEx,
      dividends: [
        { exDate: '2026-11-14T00:00:00Z', amount: 0.5 },
        { exDate: '2026-05-14T00:00:00Z', amount: 0.45 },
      ],
    });
    expect(m.type === 'underlying' && m.dividends.map((d) => d.exDate)).toEqual([
      '2026-05-14T00:00:00Z',
      '2026-11-14T00:00:00Z',
    ]);
  });

  it('rejects with the field named', () => {
    expect(reason({ ...underlyingEx, kind: 'bond' })).toBe(
      'underlying.kind must be one of equity, future, fx',
    );
    expect(reason({ ...underlyingEx, currency: 'usd' })).toBe(
      'underlying.currency must be a three-letter upper-case currency code',
    );
    expect(reason({ ...underlyingEx, currency: 'US' })).toBe(
      'underlying.currency must be a three-letter upper-case currency code',
    );
    expect(reason({ ...underlyingEx, underlying: 'A/B' })).toBe(
      "underlying.underlying must be 1 to 64 characters without spaces, '/' or '='",
    );
    expect(reason({ ...underlyingEx, underlying: '' })).toBe(
      "underlying.underlying must be 1 to 64 characters without spaces, '/' or '='",
    );
    expect(reason({ ...underlyingEx, dividendYield: 1.2 })).toBe(
      'underlying.dividendYield must be a decimal between -1 and 1 (0.04 = 4%)',
    );
    expect(reason({ ...underlyingEx, dividends: [{ exDate: '2026-05-14T00:00:00Z', amount: 0 }] })).toBe(
      'underlying.dividends[0].amount must be > 0',
    );
    expect(reason({ ...underlyingEx, dividends: [{ exDate: '2026-05-14', amount: 1 }] })).toBe(
      'underlying.dividends[0].exDate must be an ISO-8601 UTC timestamp with Z, like 2026-03-02T14:30:00.125Z',
    );
    expect(reason({ ...underlyingEx, ts: '2026-02-29T00:00:00Z' })).toBe(
      'underlying.ts must be a real date and time (got "2026-02-29T00:00:00Z")',
    );
    const { ts: _ts, ...noTs } = underlyingEx;
    expect(reason(noTs)).toBe('underlying.ts is required');
  });

  it('applies the fx rules: six-letter pair, currency = quote currency', () => {
    const fx = { type: 'underlying', underlying: 'EURUSD', kind: 'fx', currency: 'USD', ts: TS };
    expect(reason({ ...fx, currency: 'EUR' })).toBe(
      'underlying.currency must equal the quote currency USD of pair EURUSD',
    );
    expect(reason({ ...fx, underlying: 'EUR/USD' })).toBe(
      "underlying.underlying must be 1 to 64 characters without spaces, '/' or '='",
    );
    expect(reason({ ...fx, underlying: 'EURUSDX' })).toBe(
      'underlying.underlying must be a six-letter upper-case pair BASEQUOTE for kind fx, like EURUSD',
    );
    expect(reason({ ...fx, underlying: 'eurusd', currency: 'USD' })).toBe(
      'underlying.underlying must be a six-letter upper-case pair BASEQUOTE for kind fx, like EURUSD',
    );
    expect(reason({ ...fx, underlying: 'USDUSD' })).toBe(
      'underlying.underlying must name two different currencies for kind fx',
    );
  });

  it('rejects dividend data on non-equities rather than ignoring it', () => {
    const fut = { type: 'underlying', underlying: 'NIMFUT', kind: 'future', currency: 'USD', ts: TS };
    expect(reason({ ...fut, dividendYield: 0.01 })).toBe(
      'underlying.dividendYield applies only to kind equity (got kind future)',
    );
    expect(reason({ ...fut, dividends: [{ exDate: TS, amount: 1 }] })).toBe(
      'underlying.dividends apply only to kind equity (got kind future)',
    );
  });
});

describe('spot', () => {
  it('accepts the contract example', () => {
    expect(ok(spotEx)).toEqual(spotEx);
    expect(ok({ ...spotEx, ts: '2026-03-02T14:30:00Z' })).toMatchObject({ ts: '2026-03-02T14:30:00Z' });
  });
  it('rejects with the contract reason', () => {
    expect(reason({ ...spotEx, price: 0 })).toBe('spot.price must be > 0'); // the contract's own example reason
    expect(reason({ ...spotEx, price: -101.25 })).toBe('spot.price must be > 0');
    expect(reason({ ...spotEx, price: '101.25' })).toBe('spot.price must be a number');
    expect(reason({ ...spotEx, price: Number.POSITIVE_INFINITY })).toBe('spot.price must be a finite number');
    expect(reason({ ...spotEx, price: Number.NaN })).toBe('spot.price must be a finite number');
    expect(reason({ ...spotEx, price: undefined })).toBe('spot.price is required');
    expect(reason({ ...spotEx, ts: '2026-03-02T15:30:00.125+01:00' })).toBe(
      'spot.ts must be an ISO-8601 UTC timestamp with Z, like 2026-03-02T14:30:00.125Z',
    );
    expect(reason({ ...spotEx, underlying: undefined })).toBe('spot.underlying is required');
  });
  it('decodes a JSON overflow (1e999 parses to Infinity) as not finite', () => {
    const r = decodeInput('{"type":"spot","underlying":"NIMBUS","price":1e999,"ts":"2026-03-02T14:30:00Z"}');
    expect(r).toEqual({ ok: false, reason: 'spot.price must be a finite number' });
  });
});

describe('vol-surface', () => {
  it('accepts the contract example and a flat surface (one expiry, one strike)', () => {
    expect(ok(surfaceEx)).toEqual(surfaceEx);
    ok({ ...surfaceEx, expiries: [surfaceEx.expiries[0]], strikes: [100], vols: [[0.2]] });
  });
  it('checks every vol: finite, > 0 and <= 10', () => {
    const vols = (i: number, j: number, v: unknown) =>
      surfaceEx.vols.map((row, a) => row.map((x, b) => (a === i && b === j ? v : x)));
    expect(reason({ ...surfaceEx, vols: vols(1, 3, 0) })).toBe(
      'vol-surface.vols[1][3] must be > 0 and <= 10',
    );
    expect(reason({ ...surfaceEx, vols: vols(0, 4, 10.5) })).toBe(
      'vol-surface.vols[0][4] must be > 0 and <= 10',
    );
    expect(reason({ ...surfaceEx, vols: vols(0, 0, null) })).toBe('vol-surface.vols[0][0] must be a number');
    ok({ ...surfaceEx, vols: vols(0, 0, 10) });
  });
  it('checks the shape against expiries x strikes', () => {
    expect(reason({ ...surfaceEx, vols: [surfaceEx.vols[0]] })).toBe(
      'vol-surface.vols must have one row per expiry (2), got 1',
    );
    expect(reason({ ...surfaceEx, vols: [surfaceEx.vols[0], [0.2, 0.2, 0.2, 0.2]] })).toBe(
      'vol-surface.vols[1] must have one vol per strike (5), got 4',
    );
  });
  it('needs strictly increasing strikes and expiries', () => {
    expect(reason({ ...surfaceEx, strikes: [80, 90, 90, 110, 120] })).toBe(
      'vol-surface.strikes must be strictly increasing (strikes[2] = 90 is not above strikes[1] = 90)',
    );
    expect(reason({ ...surfaceEx, expiries: [surfaceEx.expiries[1], surfaceEx.expiries[0]] })).toBe(
      'vol-surface.expiries must be strictly increasing (expiries[1] = "2026-03-20T20:00:00Z" is not above expiries[0] = "2026-06-19T20:00:00Z")',
    );
    expect(reason({ ...surfaceEx, strikes: [0, 90, 100, 110, 120] })).toBe(
      'vol-surface.strikes[0] must be > 0',
    );
    expect(reason({ ...surfaceEx, strikes: [], vols: [[], []] })).toBe(
      'vol-surface.strikes must list at least one strike',
    );
    expect(reason({ ...surfaceEx, expiries: ['2026-06-31T20:00:00Z', '2026-07-19T20:00:00Z'] })).toBe(
      'vol-surface.expiries[0] must be a real date and time (got "2026-06-31T20:00:00Z")',
    );
  });
});

describe('curve', () => {
  it('accepts the contract example', () => {
    expect(ok(curveEx)).toEqual(curveEx);
    ok({ ...curveEx, tenors: [1], zeroRates: [-0.0075] }); // negative rates exist (CHF, JPY): common practice
  });
  it('rejects with the field named', () => {
    expect(reason({ ...curveEx, tenors: [0.25, 0.5, 0.5, 2, 5] })).toBe(
      'curve.tenors must be strictly increasing (tenors[2] = 0.5 is not above tenors[1] = 0.5)',
    );
    expect(reason({ ...curveEx, tenors: [0, 0.5, 1, 2, 5] })).toBe('curve.tenors[0] must be > 0');
    expect(reason({ ...curveEx, zeroRates: [0.043, 0.042] })).toBe(
      'curve.zeroRates must have one rate per tenor (5), got 2',
    );
    expect(reason({ ...curveEx, zeroRates: [4.3, 0.042, 0.04, 0.038, 0.037] })).toBe(
      'curve.zeroRates[0] must be a decimal between -1 and 1 (0.04 = 4%)',
    );
    expect(reason({ ...curveEx, currency: 'DOLLAR' })).toBe(
      'curve.currency must be a three-letter upper-case currency code',
    );
    expect(reason({ ...curveEx, tenors: [], zeroRates: [] })).toBe(
      'curve.tenors must list at least one tenor',
    );
  });
});

describe('trade', () => {
  const opt = tradeEx.instrument;
  it('accepts the contract example, amend and a bare cancel', () => {
    expect(ok(tradeEx)).toEqual(tradeEx);
    ok({ ...tradeEx, action: 'amend', version: 2, book: 'INDEX-2' });
    const cancel = {
      type: 'trade',
      tradeId: 'T-000017',
      version: 3,
      action: 'cancel',
      underlying: 'NIMBUS',
      ts: TS,
    };
    expect(ok(cancel)).toEqual(cancel);
    // A cancel's other fields are not needed and not kept.
    expect(ok({ ...tradeEx, action: 'cancel', version: 3 })).toEqual(cancel);
  });
  it('applies instrument defaults: payoff vanilla, multiplier 1', () => {
    const m = ok({
      ...tradeEx,
      instrument: { kind: 'option', right: 'put', strike: 95, expiry: '2026-06-19T20:00:00Z' },
    });
    expect(m.type === 'trade' && m.action !== 'cancel' && m.instrument).toEqual({
      kind: 'option',
      right: 'put',
      payoff: 'vanilla',
      strike: 95,
      expiry: '2026-06-19T20:00:00Z',
      multiplier: 1,
    });
    const lin = ok({ ...tradeEx, instrument: { kind: 'linear' }, price: 101 });
    expect(lin.type === 'trade' && lin.action !== 'cancel' && lin.instrument).toEqual({
      kind: 'linear',
      multiplier: 1,
    });
  });
  it('accepts digitals', () => {
    ok({ ...tradeEx, instrument: { ...opt, payoff: 'cash-digital', cashAmount: 1000 } });
    ok({ ...tradeEx, instrument: { ...opt, payoff: 'asset-digital' } });
    ok({ ...tradeEx, instrument: { ...opt, exercise: 'european' } });
  });
  it('rejects with the field named', () => {
    expect(reason({ ...tradeEx, instrument: { ...opt, strike: -100 } })).toBe(
      'trade.instrument.strike must be > 0',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, right: 'straddle' } })).toBe(
      'trade.instrument.right must be one of call, put',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, payoff: 'barrier' } })).toBe(
      'trade.instrument.payoff must be one of vanilla, cash-digital, asset-digital',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, expiry: '2026-06-19' } })).toBe(
      'trade.instrument.expiry must be an ISO-8601 UTC timestamp with Z, like 2026-03-02T14:30:00.125Z',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, multiplier: 0 } })).toBe(
      'trade.instrument.multiplier must be > 0',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, payoff: 'cash-digital' } })).toBe(
      'trade.instrument.cashAmount is required (> 0) for payoff cash-digital',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, payoff: 'cash-digital', cashAmount: 0 } })).toBe(
      'trade.instrument.cashAmount must be > 0',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, cashAmount: 5 } })).toBe(
      'trade.instrument.cashAmount applies only to payoff cash-digital (got payoff vanilla)',
    );
    expect(reason({ ...tradeEx, instrument: { ...opt, exercise: 'american' } })).toBe(
      'trade.instrument.exercise must be european (the only exercise style in v1)',
    );
    expect(reason({ ...tradeEx, instrument: { kind: 'swap' } })).toBe(
      'trade.instrument.kind must be one of option, linear',
    );
    expect(reason({ ...tradeEx, instrument: undefined })).toBe('trade.instrument is required');
    expect(reason({ ...tradeEx, version: 0 })).toBe('trade.version must be an integer >= 1');
    expect(reason({ ...tradeEx, version: 1.5 })).toBe('trade.version must be an integer >= 1');
    expect(reason({ ...tradeEx, version: '1' })).toBe('trade.version must be a number');
    expect(reason({ ...tradeEx, action: 'close' })).toBe('trade.action must be one of new, amend, cancel');
    expect(reason({ ...tradeEx, quantity: '25' })).toBe('trade.quantity must be a number');
    expect(reason({ ...tradeEx, price: -1 })).toBe('trade.price must be >= 0');
    expect(reason({ ...tradeEx, desk: 'VOL DESK' })).toBe(
      "trade.desk must be 1 to 64 characters without spaces, '/' or '='",
    );
    expect(reason({ ...tradeEx, book: 'a=b' })).toBe(
      "trade.book must be 1 to 64 characters without spaces, '/' or '='",
    );
    expect(reason({ ...tradeEx, tradeId: '' })).toBe(
      'trade.tradeId must be 1 to 128 characters without spaces',
    );
    expect(reason({ type: 'trade', tradeId: 'T-1', version: 2, action: 'cancel', ts: TS })).toBe(
      'trade.underlying is required',
    );
  });
});

describe('limit', () => {
  it('accepts the contract example and applies defaults warnAt 0.8, hysteresis 0.05', () => {
    expect(ok(limitEx)).toEqual(limitEx);
    const { warnAt: _w, hysteresis: _h, min: _m, ...bare } = limitEx;
    expect(ok(bare)).toEqual({ ...bare, warnAt: 0.8, hysteresis: 0.05 });
    ok({ ...bare, scope: {}, metric: 'pv', max: 1e7 }); // firm-wide
    ok({ ...bare, scope: { desk: 'VOLATILITY', tenor: '31-90d' }, metric: 'vega', max: 1e5 });
    ok({ ...bare, scope: { underlying: 'NIMBUS' }, metric: 'delta', max: undefined, min: -5000 });
    ok({ ...bare, hysteresis: 0 });
  });
  it('rejects with the field named', () => {
    expect(reason({ ...limitEx, scope: { desk: 'VOLATILITY' }, metric: 'delta' })).toBe(
      'limit.scope must include underlying for metric delta', // the task's own example reason
    );
    expect(reason({ ...limitEx, scope: {}, metric: 'gamma' })).toBe(
      'limit.scope must include underlying for metric gamma',
    );
    expect(reason({ ...limitEx, max: undefined, min: undefined })).toBe(
      'limit must set max (> 0) or min (< 0), or both',
    );
    expect(reason({ ...limitEx, max: 0 })).toBe('limit.max must be > 0');
    expect(reason({ ...limitEx, min: 5 })).toBe('limit.min must be < 0');
    expect(reason({ ...limitEx, warnAt: 1 })).toBe('limit.warnAt must be > 0 and < 1');
    expect(reason({ ...limitEx, warnAt: 0 })).toBe('limit.warnAt must be > 0 and < 1');
    expect(reason({ ...limitEx, hysteresis: 0.5 })).toBe('limit.hysteresis must be >= 0 and < 0.5');
    expect(reason({ ...limitEx, hysteresis: -0.01 })).toBe('limit.hysteresis must be >= 0 and < 0.5');
    expect(reason({ ...limitEx, warnAt: 0.3, hysteresis: 0.3 })).toBe(
      'limit.hysteresis must be below warnAt (0.3), else a warning could never clear',
    );
    expect(reason({ ...limitEx, metric: 'vanna' })).toBe(
      'limit.metric must be one of pv, pnl, delta, cashDelta, gamma, cashGamma, vega, theta, rho',
    );
    expect(reason({ ...limitEx, scope: { tenor: '1y' } })).toBe(
      'limit.scope.tenor must be one of 0-30d, 31-90d, 91-180d, 181-365d, 366d+',
    );
    expect(reason({ ...limitEx, scope: undefined })).toBe('limit.scope is required');
    expect(reason({ ...limitEx, limitId: undefined })).toBe('limit.limitId is required');
  });
  it('limit-remove', () => {
    const rm = { type: 'limit-remove', limitId: 'L-VOL-NIMBUS-VEGA', ts: TS };
    expect(ok(rm)).toEqual(rm);
    expect(reason({ ...rm, limitId: 3 })).toBe('limit-remove.limitId must be a string');
    expect(reason({ ...rm, ts: undefined })).toBe('limit-remove.ts is required');
  });
});
