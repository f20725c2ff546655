// The runner publishes ExposureView.json() in place of JSON.stringify(exposure): the two must be
// byte-identical on every shape of node (null delta above the underlying level, unpriced counts,
// stale flags, a node dropped to zeros, limit-only scopes). The reference is JSON.stringify itself
// (ECMA-262 JSON serialisation), applied to what drain() publishes.
import { describe, expect, it } from 'vitest';
import { RiskEngine } from './engine.ts';
import { DAY, T0, acmeMarket, feed, limit, spot, trade, underlying } from './test-support.ts';

function bothWays(e: RiskEngine): void {
  const viaDrain = e.snapshot();
  const { changed } = e.drainChanged();
  expect(changed.length).toBeGreaterThan(0);
  for (const v of changed) {
    expect(v.json()).toBe(JSON.stringify(v.exposure()));
    const snap = viaDrain.find((x) => x.nodeKey === v.key);
    if (snap) expect(v.json()).toBe(JSON.stringify(snap));
    expect(JSON.parse(v.json())).toEqual(v.exposure());
  }
}

describe('ExposureView.json', () => {
  it('matches JSON.stringify for priced, unpriced, stale and dropped nodes', () => {
    const e = new RiskEngine({ clock: 'event', staleAfterMs: 1000 });
    feed(e, acmeMarket());
    feed(e, [
      trade({ id: 'T1', quantity: 3, multiplier: 100, price: 7.25 }),
      trade({ id: 'T2', desk: 'QUAY', book: 'Q\\1"é', quantity: -2, right: 'put', strike: 90 }),
      trade({ id: 'T3', underlying: 'NOREF', quantity: 1 }),
      trade({ id: 'T4', linear: true, quantity: 10, price: 99.5 }),
      limit({ limitId: 'L1', scope: { desk: 'ORCHARD', underlying: 'ACME' }, metric: 'vega', max: 1 }),
    ]);
    bothWays(e);
    // a later tick leaves ACME stale once time moves past the threshold through another feed
    feed(e, [underlying('OTHER'), spot('OTHER', 5, T0 + 5000)]);
    feed(e, [spot('ACME', 101.5, T0 + 6000)]);
    bothWays(e);
    feed(e, [trade({ id: 'T2', version: 2, action: 'cancel', ts: T0 + DAY })]);
    bothWays(e);
  });
});
