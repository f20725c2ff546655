// LimitMonitor against the contract's alert rules: one alert per level change, alertId stable within
// an episode and new for the next, limitId order, replacement keeps the level, removal clears.
import { describe, expect, it } from 'vitest';
import type { LimitMsg, Metric } from '@keelson/shared-types';
import { LimitMonitor } from './limits.ts';
import type { MetricValues } from './limits.ts';
import { T0, limit } from './test-support.ts';

const vegaLimit = (id: string, o: Record<string, unknown> = {}): LimitMsg =>
  limit({ limitId: id, scope: { desk: 'ORCHARD' }, metric: 'vega', max: 1000, ...o }) as LimitMsg;

function values(v: Partial<Record<Metric, number>>): MetricValues {
  return {
    pv: 0,
    pnl: 0,
    delta: null,
    cashDelta: 0,
    gamma: null,
    cashGamma: 0,
    vega: 0,
    theta: 0,
    rho: 0,
    ...v,
  };
}

describe('LimitMonitor', () => {
  it('walks raised, escalated, eased, cleared with one alertId per episode', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1'));
    const path = [500, 850, 1200, 960, 900, 700, 100, 820, 1000];
    const alerts = path.flatMap((v, i) =>
      m
        .check('desk=ORCHARD', values({ vega: v }), T0 + i)
        .map((a) => [v, a.state, a.severity, a.previous, a.alertId]),
    );
    expect(alerts).toEqual([
      [850, 'raised', 'warning', 'ok', 'L1#1'],
      [1200, 'escalated', 'breach', 'warning', 'L1#1'],
      // 960 >= 1 - 0.05: stays breach, no alert
      [900, 'eased', 'warning', 'breach', 'L1#1'],
      [700, 'cleared', 'ok', 'warning', 'L1#1'],
      [820, 'raised', 'warning', 'ok', 'L1#2'],
      [1000, 'escalated', 'breach', 'warning', 'L1#2'],
    ]);
  });

  it('reports value, bound and utilization on the side the value is on', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1', { min: -500 }));
    const [a] = m.check('desk=ORCHARD', values({ vega: -600 }), T0);
    expect(a).toMatchObject({
      value: -600,
      bound: -500,
      utilization: 1.2,
      severity: 'breach',
      state: 'raised',
      metric: 'vega',
      nodeKey: 'desk=ORCHARD',
    });
    expect(a?.ts).toBe('2026-01-05T00:00:00.000Z');
  });

  it('stamps alerts with the exposure asOf when no time is given', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1'));
    const [a] = m.check('desk=ORCHARD', { ...values({ vega: 5000 }), asOf: '2026-03-02T09:00:00.250Z' });
    expect(a?.ts).toBe('2026-03-02T09:00:00.250Z');
    expect(() => m.check('desk=ORCHARD', values({ vega: 0 }))).toThrow(/no time given/);
  });

  it('puts the alerts of one node in limitId order', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L-b'));
    m.set(vegaLimit('L-c'));
    m.set(vegaLimit('L-a'));
    expect(m.check('desk=ORCHARD', values({ vega: 2000 }), T0).map((a) => a.limitId)).toEqual([
      'L-a',
      'L-b',
      'L-c',
    ]);
  });

  it('keeps the level through a replacement and rechecks against the new bounds', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1'));
    m.check('desk=ORCHARD', values({ vega: 1100 }), T0); // breach
    m.set(vegaLimit('L1', { max: 1150 })); // 1100/1150 = 0.9565 >= 0.95: still breach
    expect(m.checkLimit('L1', values({ vega: 1100 }), T0)).toBeUndefined();
    m.set(vegaLimit('L1', { max: 2000 })); // 0.55: clears, same episode
    expect(m.checkLimit('L1', values({ vega: 1100 }), T0)).toMatchObject({
      state: 'cleared',
      alertId: 'L1#1',
      previous: 'breach',
    });
  });

  it('clears an open episode on removal, at the last value', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1'));
    m.check('desk=ORCHARD', values({ vega: 900 }), T0);
    expect(m.openAlerts().map((a) => a.alertId)).toEqual(['L1#1']);
    const { alerts, scopeKey } = m.remove('L1', T0 + 5);
    expect(scopeKey).toBe('desk=ORCHARD');
    expect(alerts).toEqual([
      expect.objectContaining({
        state: 'cleared',
        severity: 'ok',
        previous: 'warning',
        value: 900,
        alertId: 'L1#1',
        ts: '2026-01-05T00:00:00.005Z',
      }),
    ]);
    expect(m.openAlerts()).toEqual([]);
    expect(m.scopes()).toEqual([]);
  });

  it('removes without an alert when the limit was at ok', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1'));
    expect(m.remove('L1', T0).alerts).toEqual([]);
  });

  it('moves a limit to its new scope on replacement', () => {
    const m = new LimitMonitor();
    m.set(vegaLimit('L1'));
    expect(m.set(vegaLimit('L1', { scope: { desk: 'ORCHARD', tenor: '31-90d' } }))).toEqual({
      scopeKey: 'desk=ORCHARD/tenor=31-90d',
      previousScopeKey: 'desk=ORCHARD',
    });
    expect(m.scopes()).toEqual(['desk=ORCHARD/tenor=31-90d']);
  });
});
