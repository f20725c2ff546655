// Scale-out: the sum of per-partition partials equals one engine that saw every input.
import { describe, expect, it } from 'vitest';
import { RiskEngine } from './engine.ts';
import { exposureFromPartials } from './partials.ts';
import type { NodePartial } from './partials.ts';
import { acmeMarket, feed, flatSurface, spot, trade, underlying } from './test-support.ts';
import type { InputMsg } from '@keelson/shared-types';

describe('exposureFromPartials', () => {
  const shared = acmeMarket();
  const zed: InputMsg[] = [underlying('ZED'), flatSurface('ZED', 0.4), spot('ZED', 50)];
  const acmeTrades = [
    trade({ id: 'A1', quantity: 10 }),
    trade({ id: 'A2', right: 'put', book: 'B2', quantity: -4 }),
    trade({ id: 'A3', underlying: 'GHOST' }),
  ];
  const zedTrades = [
    trade({ id: 'Z1', underlying: 'ZED', strike: 55, quantity: 7 }),
    trade({ id: 'Z2', underlying: 'ZED', linear: true, quantity: 100, price: 49 }),
  ];

  it('adds the partitions of a node exactly as one engine would have', () => {
    const p0 = new RiskEngine({ clock: 'event' });
    const p1 = new RiskEngine({ clock: 'event' });
    const all = new RiskEngine({ clock: 'event' });
    feed(p0, [...shared, ...acmeTrades]);
    feed(p1, [...shared, ...zed, ...zedTrades]);
    feed(all, [...shared, ...zed, ...acmeTrades, ...zedTrades]);
    const byKey = new Map<string, NodePartial[]>();
    for (const p of [...p0.partials(), ...p1.partials()])
      byKey.set(p.nodeKey, [...(byKey.get(p.nodeKey) ?? []), p]);
    const combined = [...byKey.keys()].sort().map((k) => exposureFromPartials(byKey.get(k) as NodePartial[]));
    const whole = all.snapshot();
    expect(combined.map((x) => x.nodeKey)).toEqual(whole.map((x) => x.nodeKey));
    combined.forEach((c, i) => {
      const w = whole[i]!;
      const rest = (x: typeof c) => ({
        k: x.nodeKey,
        n: x.node,
        p: x.positions,
        u: x.unpriced,
        s: x.stale,
        a: x.asOf,
        c: x.currency,
        d: x.delta === null,
      });
      expect(rest(c)).toEqual(rest(w));
      if (c.delta !== null) expect(c.delta).toBeCloseTo(w.delta as number, 9);
      for (const m of ['pv', 'pnl', 'cashDelta', 'cashGamma', 'vega', 'theta', 'rho'] as const)
        expect(c[m]).toBeCloseTo(w[m], 9);
    });
    expect(byKey.get('firm')?.length).toBe(2);
    expect(combined.find((x) => x.nodeKey === 'firm')).toMatchObject({
      positions: 5,
      unpriced: { 'no-reference': 1 },
      delta: null,
    });
  });

  it('refuses partials of different nodes', () => {
    const e = new RiskEngine({ clock: 'event' });
    feed(e, [...shared, trade({ id: 'A1' })]);
    const parts = e.partials();
    expect(() => exposureFromPartials(parts)).toThrow(/mixed nodes/);
    expect(() => exposureFromPartials([])).toThrow(/no partials/);
  });

  it('drains changed nodes as partials, a dropped node as a zero partial', () => {
    const e = new RiskEngine({ clock: 'event' });
    feed(e, [...shared, trade({ id: 'A1' })]);
    e.drainPartials();
    feed(e, [trade({ id: 'A1', version: 2, action: 'cancel' })]);
    const { partials } = e.drainPartials();
    expect(partials.map((p) => [p.nodeKey, p.positions, p.sums.pv])).toContainEqual(['firm', 0, 0]);
  });
});
