import { describe, expect, it } from 'vitest';
import type { BusRecord } from '@keelson/bus';
import type { LimitView, Signal } from '@keelson/http';
import type { ExposureMsg } from '@keelson/shared-types';
import { BoardState, run, utilizationOf } from './board.ts';

class Sink {
  exposures: ExposureMsg[] = [];
  signals: Signal[] = [];
  limits: LimitView[] = [];
  publishExposure(e: ExposureMsg): void {
    this.exposures.push(e);
  }
  publishAlert(a: Signal): void {
    this.signals.push(a);
  }
  publishLimit(v: LimitView): void {
    this.limits.push(v);
  }
}

const rec = (topic: string, value: unknown): BusRecord => ({
  topic,
  key: null,
  value: typeof value === 'string' ? value : JSON.stringify(value),
});

// The contract's own examples (contract-v1.md: the limit and alert messages).
const limit = {
  type: 'limit',
  limitId: 'L-VOL-NIMBUS-VEGA',
  scope: { desk: 'VOLATILITY', underlying: 'NIMBUS' },
  metric: 'vega',
  max: 250000,
  min: -250000,
  warnAt: 0.8,
  hysteresis: 0.05,
  ts: '2026-03-02T14:30:00Z',
};
const exposure = (vega: number): ExposureMsg => ({
  type: 'exposure',
  nodeKey: 'desk=VOLATILITY/underlying=NIMBUS',
  node: { desk: 'VOLATILITY', underlying: 'NIMBUS' },
  currency: 'USD',
  asOf: '2026-03-02T14:30:01Z',
  pv: 0,
  pnl: 0,
  delta: 0,
  cashDelta: 0,
  gamma: 0,
  cashGamma: 0,
  vega,
  theta: 0,
  rho: 0,
  positions: 42,
  unpriced: { 'no-vol': 1 },
  stale: false,
});
const alert = {
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
  ts: '2026-03-02T14:30:01Z',
};

describe('utilizationOf', () => {
  it('follows the contract rule on both sides and without a bound on the side of the value', () => {
    // contract-v1.md, alert: value 262000 against max 250000 is u = 1.048.
    expect(utilizationOf(262000, 250000, -250000)).toBeCloseTo(1.048, 12);
    expect(utilizationOf(-200000, 250000, -250000)).toBeCloseTo(0.8, 12);
    expect(utilizationOf(-200000, 250000, undefined)).toBe(0);
    expect(utilizationOf(5, undefined, -10)).toBe(0);
  });
});

describe('BoardState', () => {
  it('builds a limit bar from the limit topic, the node exposure and the latest alert', () => {
    const sink = new Sink();
    const s = new BoardState(sink);
    expect(s.apply(rec('limits', limit))).toEqual({ ok: true });
    expect(sink.limits.at(-1)).toMatchObject({
      limitId: 'L-VOL-NIMBUS-VEGA',
      value: 0,
      utilization: 0,
      level: 'ok',
      warnAt: 0.8,
      hysteresis: 0.05,
    });
    expect(s.apply(rec('exposures', exposure(262000)))).toEqual({ ok: true });
    expect(sink.exposures).toHaveLength(1);
    expect(sink.limits.at(-1)!.utilization).toBeCloseTo(1.048, 12);
    expect(sink.limits.at(-1)!.level).toBe('ok'); // the level moves only with the engine's alert
    expect(s.apply(rec('alerts', alert))).toEqual({ ok: true });
    expect(sink.signals).toHaveLength(1);
    expect(sink.limits.at(-1)).toMatchObject({
      level: 'breach',
      max: 250000,
      min: -250000,
      nodeKey: 'desk=VOLATILITY/underlying=NIMBUS',
    });
    expect(s.openAlerts().map((a) => a.alertId)).toEqual(['L-VOL-NIMBUS-VEGA#3']);
    expect(s.exposures().map((e) => e.vega)).toEqual([262000]);
  });

  it('drops a removed limit and passes stale-feed events through to the log', () => {
    const sink = new Sink();
    const s = new BoardState(sink);
    s.apply(rec('limits', limit));
    expect(
      s.apply(
        rec('limits', { type: 'limit-remove', limitId: 'L-VOL-NIMBUS-VEGA', ts: '2026-03-02T14:31:00Z' }),
      ),
    ).toEqual({ ok: true });
    expect(s.limits()).toEqual([]);
    const stale = {
      type: 'stale-feed',
      underlying: 'NIMBUS',
      state: 'raised',
      lastTick: '2026-03-02T14:30:00Z',
      ts: '2026-03-02T14:30:06Z',
    };
    expect(s.apply(rec('alerts', stale))).toEqual({ ok: true });
    expect(s.recentSignals()).toEqual([stale]);
  });

  it('skips records it cannot read with a reason naming the field, and keeps what it had', () => {
    const sink = new Sink();
    const s = new BoardState(sink);
    s.apply(rec('exposures', exposure(1)));
    expect(s.apply(rec('exposures', '{not json'))).toEqual({
      ok: false,
      reason: 'exposures: record is not valid JSON',
    });
    const bad = s.apply(rec('exposures', { ...exposure(2), vega: 'lots' }));
    expect(bad.ok).toBe(false);
    expect(!bad.ok && bad.reason).toContain('vega');
    const badLimit = s.apply(rec('limits', { ...limit, warnAt: 1.5 }));
    expect(!badLimit.ok && badLimit.reason).toContain('limit.warnAt');
    expect(s.exposures().map((e) => e.vega)).toEqual([1]);
  });

  it('keeps only the most recent signals for a newly connected page', () => {
    const s = new BoardState(new Sink(), 2);
    for (let i = 1; i <= 3; i++) s.apply(rec('alerts', { ...alert, alertId: `L-VOL-NIMBUS-VEGA#${i}` }));
    expect(s.recentSignals().map((a) => (a.type === 'alert' ? a.alertId : ''))).toEqual([
      'L-VOL-NIMBUS-VEGA#2',
      'L-VOL-NIMBUS-VEGA#3',
    ]);
  });
});

describe('keelson board arguments', () => {
  const io = () => {
    let out = '';
    let err = '';
    return {
      io: {
        stdin: process.stdin,
        stdout: { write: (s: string) => ((out += s), true) } as unknown as NodeJS.WritableStream,
        stderr: { write: (s: string) => ((err += s), true) } as unknown as NodeJS.WritableStream,
      },
      out: () => out,
      err: () => err,
    };
  };

  it('refuses to start without brokers and names bad options', async () => {
    const saved = process.env.KAFKA_BROKERS;
    delete process.env.KAFKA_BROKERS;
    try {
      const a = io();
      expect(await run([], a.io)).toBe(1);
      expect(a.err()).toContain('no brokers');
      const b = io();
      expect(await run(['--brokers', 'x:1', '--port=-3'], b.io)).toBe(1);
      expect(b.err()).toContain("--port must be an integer >= 0, got '-3'");
      const d = io();
      expect(await run(['--brokers', 'x:1', '--recent-alerts', '2.5'], d.io)).toBe(1);
      expect(d.err()).toContain("--recent-alerts must be an integer > 0, got '2.5'");
      const c = io();
      expect(await run(['--help'], c.io)).toBe(0);
      expect(c.out()).toContain('usage: keelson board');
    } finally {
      if (saved !== undefined) process.env.KAFKA_BROKERS = saved;
    }
  });
});
