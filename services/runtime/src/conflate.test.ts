import { describe, expect, it } from 'vitest';
import type { BusRecord } from '@keelson/bus';
import { planBatch } from './conflate.ts';

const spot = (u: string, price: number, ts: string): BusRecord => ({
  topic: 'spots',
  key: u,
  value: JSON.stringify({ type: 'spot', underlying: u, price, ts }),
});
const trade = (u: string): BusRecord => ({
  topic: 'trades',
  key: u,
  value: JSON.stringify({
    type: 'trade',
    tradeId: 'T-1',
    version: 1,
    action: 'cancel',
    underlying: u,
    ts: '2026-03-02T14:30:00Z',
  }),
});
const curve: BusRecord = {
  topic: 'curves',
  key: 'USD',
  value: JSON.stringify({
    type: 'curve',
    currency: 'USD',
    ts: '2026-03-02T14:30:00Z',
    tenors: [1],
    zeroRates: [0.04],
  }),
};
const applied = (batch: BusRecord[]) => {
  const plan = planBatch([batch.slice(0, 1), batch.slice(1)]); // chunks read as one batch
  return [...plan.apply].map((a, i) => (a ? i : -1)).filter((i) => i >= 0);
};

describe('planBatch (spot conflation)', () => {
  it('applies only the newest spot of a run per underlying, other underlyings untouched', () => {
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      spot('BY', 5, '2026-03-02T14:30:00.000Z'),
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
      spot('AX', 3, '2026-03-02T14:30:00.200Z'),
    ];
    const plan = planBatch([b]);
    expect(applied(b)).toEqual([1, 3]);
    expect(plan.conflated).toBe(2);
    expect(plan.spotOf[3]).toBe('AX');
    expect(plan.tsMs[3]).toBe(Date.parse('2026-03-02T14:30:00.200Z'));
    // each record is decoded once, here, and the engine is handed the result
    expect(plan.decoded(3, b[3]!.value)).toEqual({ ok: true, msg: JSON.parse(b[3]!.value) });
  });

  it('never conflates across another input of the same underlying: a trade sees the spot before it', () => {
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      trade('AX'),
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
      spot('AX', 3, '2026-03-02T14:30:00.200Z'),
    ];
    expect(applied(b)).toEqual([0, 1, 3]);
  });

  it('a trade on another underlying does not break the run', () => {
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      trade('BY'),
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
    ];
    expect(applied(b)).toEqual([1, 2]);
  });

  it('an input not tied to one underlying (a curve) ends every run', () => {
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      spot('BY', 1, '2026-03-02T14:30:00.000Z'),
      curve,
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
    ];
    expect(applied(b)).toEqual([0, 1, 2, 3]);
  });

  it('never skips an invalid spot: it must reach the dead letter topic', () => {
    const b = [spot('AX', -1, '2026-03-02T14:30:00.000Z'), spot('AX', 2, '2026-03-02T14:30:00.100Z')];
    expect(applied(b)).toEqual([0, 1]);
  });

  it('keeps a spot whose ts is newer than the run end, so an event clock sees the largest ts', () => {
    const b = [spot('AX', 1, '2026-03-02T14:30:09.000Z'), spot('AX', 2, '2026-03-02T14:30:00.100Z')];
    expect(applied(b)).toEqual([0, 1]);
  });

  it('undecodable records neither break runs nor get skipped', () => {
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      { topic: 'spots', key: 'AX', value: '{not json' },
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
    ];
    expect(applied(b)).toEqual([1, 2]);
  });

  it('an invalid record changes nothing, so it ends no run (and is applied, to be rejected)', () => {
    const badTrade: BusRecord = {
      topic: 'trades',
      key: 'AX',
      value: JSON.stringify({ type: 'trade', underlying: 'AX' }),
    };
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      badTrade,
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
    ];
    const plan = planBatch([b]);
    expect(applied(b)).toEqual([1, 2]);
    expect(plan.decoded(1, b[1]!.value).ok).toBe(false);
  });

  it('reads spots in any key order or spacing the same way (the hand reader only takes the canonical form)', () => {
    const odd: BusRecord = {
      topic: 'spots',
      key: 'AX',
      value: '{ "ts": "2026-03-02T14:30:00.050Z", "price": 1.5, "underlying": "AX", "type": "spot" }',
    };
    const b = [spot('AX', 1, '2026-03-02T14:30:00.000Z'), odd, spot('AX', 2, '2026-03-02T14:30:00.100Z')];
    const plan = planBatch([b]);
    expect(applied(b)).toEqual([2]);
    expect(plan.spotOf[1]).toBe('AX');
    expect(plan.tsMs[1]).toBe(Date.parse('2026-03-02T14:30:00.050Z'));
    expect(plan.decoded(1, odd.value)).toEqual({
      ok: true,
      msg: { type: 'spot', underlying: 'AX', price: 1.5, ts: '2026-03-02T14:30:00.050Z' },
    });
  });
});
