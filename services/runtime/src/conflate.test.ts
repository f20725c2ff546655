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
const applied = (batch: BusRecord[]) =>
  planBatch(batch)
    .records.map((r, i) => (r.apply ? i : -1))
    .filter((i) => i >= 0);

describe('planBatch (spot conflation)', () => {
  it('applies only the newest spot of a run per underlying, other underlyings untouched', () => {
    const b = [
      spot('AX', 1, '2026-03-02T14:30:00.000Z'),
      spot('BY', 5, '2026-03-02T14:30:00.000Z'),
      spot('AX', 2, '2026-03-02T14:30:00.100Z'),
      spot('AX', 3, '2026-03-02T14:30:00.200Z'),
    ];
    const plan = planBatch(b);
    expect(applied(b)).toEqual([1, 3]);
    expect(plan.conflated).toBe(2);
    expect(plan.records[3]!.spot).toEqual({ underlying: 'AX', tsMs: Date.parse('2026-03-02T14:30:00.200Z') });
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
});
