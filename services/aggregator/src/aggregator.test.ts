import { describe, expect, it } from 'vitest';
import type { NodePartial } from '@keelson/engine';
import { PartialsAggregator, decodePartial, partialKey } from './aggregator.ts';
import type { PartialWire } from './aggregator.ts';

const ZERO = { pv: 0, pnl: 0, delta: 0, cashDelta: 0, gamma: 0, cashGamma: 0, vega: 0, theta: 0, rho: 0 };

function wire(
  nodeKey: string,
  node: NodePartial['node'],
  sourcePartition: number,
  pv: number,
  positions: number,
  asOf = '2026-03-02T14:00:00Z',
): PartialWire {
  const partial: NodePartial = {
    nodeKey,
    node,
    currency: 'USD',
    asOf,
    sums: { ...ZERO, pv, vega: pv / 10 },
    positions,
    unpriced: {},
    staleCount: 0,
  };
  return { type: 'partial', key: partialKey(nodeKey, sourcePartition), sourcePartition, partial };
}

const limit = (max: number) =>
  JSON.stringify({
    type: 'limit',
    limitId: 'L-FIRM-PV',
    scope: {},
    metric: 'pv',
    max,
    warnAt: 0.8,
    hysteresis: 0.05,
    ts: '2026-03-02T14:00:00Z',
  });

describe('PartialsAggregator', () => {
  it('sums the latest partial of each source partition, and a replaced partial is not counted twice', () => {
    const agg = new PartialsAggregator();
    agg.applyPartial(wire('firm', {}, 0, 60, 3));
    agg.applyPartial(wire('firm', {}, 1, 50, 2));
    let out = agg.drain();
    expect(out.exposures).toHaveLength(1);
    expect(out.exposures[0]).toMatchObject({
      nodeKey: 'firm',
      pv: 110,
      vega: 11,
      positions: 5,
      delta: null,
      gamma: null,
    });

    // Partition 1 moved to another engine instance, which republishes its partial: replaced, not added.
    agg.applyPartial(wire('firm', {}, 1, 50, 2, '2026-03-02T14:00:05Z'));
    out = agg.drain();
    expect(out.exposures[0]).toMatchObject({ pv: 110, positions: 5, asOf: '2026-03-02T14:00:05.000Z' });
    expect(agg.partitionsOf('firm')).toEqual([0, 1]);
  });

  it('publishes delta only on nodes that fix an underlying (contract: null elsewhere)', () => {
    const agg = new PartialsAggregator();
    agg.applyPartial(wire('underlying=NIMBUS', { underlying: 'NIMBUS' }, 2, 5, 1));
    expect(agg.drain().exposures[0]!.delta).toBe(0);
  });

  it('checks limits on the summed node with the contract levels and hysteresis', () => {
    const agg = new PartialsAggregator();
    expect(agg.applyLimit(limit(100))).toBeUndefined();
    agg.applyPartial(wire('firm', {}, 0, 60, 3));
    agg.applyPartial(wire('firm', {}, 1, 50, 2));
    // u = 110 / 100 = 1.1: breach, raised from ok (contract: utilization = value / max).
    expect(agg.drain().alerts).toMatchObject([
      {
        limitId: 'L-FIRM-PV',
        severity: 'breach',
        state: 'raised',
        previous: 'ok',
        value: 110,
        utilization: 1.1,
      },
    ]);
    // u = 0.8 after partition 1 drops to 20: below 1 - 0.05, so breach eases to warning (the contract's example).
    agg.applyPartial(wire('firm', {}, 1, 20, 2));
    expect(agg.drain().alerts).toMatchObject([{ severity: 'warning', state: 'eased', previous: 'breach' }]);
    // u = 0.77 stays warning (>= 0.8 - 0.05): no alert at all.
    agg.applyPartial(wire('firm', {}, 1, 17, 2));
    expect(agg.drain().alerts).toEqual([]);
    // Removing the limit clears the open episode.
    expect(
      agg.applyLimit(
        JSON.stringify({ type: 'limit-remove', limitId: 'L-FIRM-PV', ts: '2026-03-02T14:01:00Z' }),
      ),
    ).toBeUndefined();
    expect(agg.drain().alerts).toMatchObject([{ state: 'cleared', severity: 'ok' }]);
  });

  it('drops a node once every partition reports it empty, after publishing the zeros once', () => {
    const agg = new PartialsAggregator();
    agg.applyPartial(wire('desk=HARBOR', { desk: 'HARBOR' }, 0, 10, 1));
    agg.drain();
    agg.applyPartial(wire('desk=HARBOR', { desk: 'HARBOR' }, 0, 0, 0));
    expect(agg.drain().exposures).toMatchObject([{ nodeKey: 'desk=HARBOR', positions: 0, pv: 0 }]);
    expect(agg.snapshot()).toEqual([]);
  });

  it('names what is wrong with a record that is not a partial', () => {
    expect(decodePartial('nope')).toEqual({ ok: false, reason: 'partial: not JSON' });
    expect(decodePartial('{"type":"exposure"}')).toEqual({
      ok: false,
      reason: 'partial.type must be "partial"',
    });
    expect(decodePartial(JSON.stringify(wire('firm', {}, 0, 1, 1)))).toMatchObject({ ok: true });
    expect(new PartialsAggregator().applyLimit('{"type":"limit"}')).toMatch(/^limit\./);
  });
});
