import { describe, expect, it } from 'vitest';
import type { AlertMsg, LimitMsg } from '@keelson/shared-types';
import { LimitMonitor } from './limits.ts';
import { restoreLimitLevels } from './limit-restore.ts';

// Levels and transitions as the contract states them (contract-v1.md, "alert"): warnAt 0.8,
// hysteresis 0.05; in breach u 0.97 stays breach, 0.9 eases to warning, 0.7 clears.
const limit: LimitMsg = {
  type: 'limit',
  limitId: 'L-KESTREL-PV',
  scope: { desk: 'KESTREL' },
  metric: 'pv',
  max: 1000,
  warnAt: 0.8,
  hysteresis: 0.05,
  ts: '2026-03-02T14:00:00Z',
};
const values = (pv: number) => ({
  pv,
  pnl: 0,
  delta: null,
  cashDelta: 0,
  gamma: null,
  cashGamma: 0,
  vega: 0,
  theta: 0,
  rho: 0,
});
const published: AlertMsg = {
  type: 'alert',
  alertId: 'L-KESTREL-PV#3',
  limitId: 'L-KESTREL-PV',
  nodeKey: 'desk=KESTREL',
  metric: 'pv',
  value: 1200,
  bound: 1000,
  utilization: 1.2,
  severity: 'breach',
  previous: 'ok',
  state: 'raised',
  ts: '2026-03-02T14:00:05Z',
};
const t = Date.parse('2026-03-02T14:01:00Z');

describe('restoreLimitLevels', () => {
  it('continues the published episode: same level publishes nothing, a fall clears with its alertId', () => {
    const m = new LimitMonitor();
    m.set(limit);
    expect(restoreLimitLevels(m, [published])).toEqual(['L-KESTREL-PV']);
    expect(m.openAlerts()).toEqual([published]);
    expect(m.check('desk=KESTREL', values(1100), t)).toEqual([]); // still in breach: nothing
    const [cleared] = m.check('desk=KESTREL', values(100), t);
    expect(cleared).toMatchObject({ alertId: 'L-KESTREL-PV#3', state: 'cleared', previous: 'breach' });
    const [next] = m.check('desk=KESTREL', values(1500), t);
    expect(next).toMatchObject({ alertId: 'L-KESTREL-PV#4', state: 'raised' });
  });

  it('overrides a replayed level: breach from replay, warning published, escalates on the next check', () => {
    const m = new LimitMonitor();
    m.set(limit);
    expect(m.check('desk=KESTREL', values(1200), t)[0]).toMatchObject({ alertId: 'L-KESTREL-PV#1' });
    restoreLimitLevels(m, [
      { ...published, alertId: 'L-KESTREL-PV#2', severity: 'warning', utilization: 0.85 },
    ]);
    const [a] = m.check('desk=KESTREL', values(1200), t);
    expect(a).toMatchObject({ alertId: 'L-KESTREL-PV#2', state: 'escalated', previous: 'warning' });
  });

  it('a cleared episode leaves the level at ok and the next raise starts the following episode', () => {
    const m = new LimitMonitor();
    m.set(limit);
    restoreLimitLevels(m, [{ ...published, severity: 'ok', previous: 'breach', state: 'cleared' }]);
    expect(m.openAlerts()).toEqual([]);
    expect(m.check('desk=KESTREL', values(1200), t)[0]).toMatchObject({ alertId: 'L-KESTREL-PV#4' });
  });

  it('ignores alerts of limits it does not hold and alertIds of another form', () => {
    const m = new LimitMonitor();
    m.set(limit);
    expect(restoreLimitLevels(m, [{ ...published, limitId: 'L-GONE', alertId: 'L-GONE#1' }])).toEqual([]);
    expect(restoreLimitLevels(m, [{ ...published, alertId: 'something-else' }])).toEqual([]);
    expect(m.check('desk=KESTREL', values(1200), t)[0]).toMatchObject({ alertId: 'L-KESTREL-PV#1' });
  });
});
