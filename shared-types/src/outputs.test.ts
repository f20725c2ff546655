/** Output messages: the contract's examples (/work/shared/contract-v1.md) parse; bad ones do not. */
import { describe, expect, it } from 'vitest';
import { alertSchema, exposureSchema, rejectedSchema, staleFeedSchema } from './outputs.ts';
import { validateOutput } from './decode.ts';

const TS = '2026-03-02T14:30:00.125Z';
const exposureEx = {
  type: 'exposure',
  nodeKey: 'desk=VOLATILITY/underlying=NIMBUS',
  node: { desk: 'VOLATILITY', underlying: 'NIMBUS' },
  currency: 'USD',
  asOf: TS,
  pv: 0,
  pnl: 0,
  delta: 0,
  cashDelta: 0,
  gamma: 0,
  cashGamma: 0,
  vega: 0,
  theta: 0,
  rho: 0,
  positions: 42,
  unpriced: { 'no-vol': 1 },
  stale: false,
};
const alertEx = {
  type: 'alert',
  alertId: 'L-VOL-NIMBUS-VEGA#3',
  limitId: 'L-VOL-NIMBUS-VEGA',
  nodeKey: 'desk=VOLATILITY/underlying=NIMBUS',
  metric: 'vega',
  value: 262000,
  bound: 250000,
  utilization: 1.048,
  severity: 'breach',
  previous: 'warning',
  state: 'escalated',
  ts: TS,
};

function why(x: object): string {
  const r = validateOutput(x);
  if (r.ok) throw new Error('expected rejection');
  return r.reason;
}

describe('output schemas', () => {
  it('accept the contract examples', () => {
    expect(exposureSchema.parse(exposureEx)).toEqual(exposureEx);
    expect(alertSchema.parse(alertEx)).toEqual(alertEx);
    const stale = { type: 'stale-feed', underlying: 'NIMBUS', state: 'raised', lastTick: TS, ts: TS };
    expect(staleFeedSchema.parse(stale)).toEqual(stale);
    const rej = {
      type: 'rejected',
      reason: 'spot.price must be > 0',
      source: 'tape line 17',
      raw: '{...}',
      ts: TS,
    };
    expect(rejectedSchema.parse(rej)).toEqual(rej);
  });
  it('validateOutput dispatches on type', () => {
    expect(validateOutput(alertEx)).toEqual({ ok: true, msg: alertEx });
    expect(validateOutput({ type: 'spot' })).toEqual({
      ok: false,
      reason: 'type must be one of exposure, alert, stale-feed, rejected',
    });
  });
  it('allow null delta and gamma on nodes without an underlying', () => {
    exposureSchema.parse({
      ...exposureEx,
      nodeKey: 'desk=VOLATILITY',
      node: { desk: 'VOLATILITY' },
      delta: null,
      gamma: null,
    });
  });
  it('refuse what must never be published: NaN, unknown reasons, bad levels', () => {
    expect(why({ ...exposureEx, pv: Number.NaN })).toBe('exposure.pv must be a finite number');
    expect(why({ ...exposureEx, unpriced: { 'no-idea': 1 } })).toMatch(/^exposure\.unpriced/);
    expect(why({ ...exposureEx, positions: -1 })).toBe('exposure.positions must be an integer >= 0');
    expect(why({ ...alertEx, state: 'open' })).toBe(
      'alert.state must be one of raised, escalated, eased, cleared',
    );
    expect(why({ ...alertEx, severity: 'critical' })).toBe(
      'alert.severity must be one of ok, warning, breach',
    );
  });
});
