import { describe, expect, it } from 'vitest';
import { tenorBucket, MS_PER_DAY } from './constants.ts';
import { decodeInput } from './decode.ts';
import type { InputMsg } from './inputs.ts';
import { TOPICS, inputKey, inputTopic, nodeKey, parseNodeKey } from './keys.ts';

function msg(line: object): InputMsg {
  const r = decodeInput(JSON.stringify(line));
  if (!r.ok) throw new Error(r.reason);
  return r.msg;
}
const ts = '2026-03-02T14:30:00Z';

describe('node keys (contract: desk, book, underlying, tenor; firm when empty)', () => {
  it('orders dimensions as the contract does, whatever the object order', () => {
    // The contract's own exposure example.
    expect(nodeKey({ underlying: 'NIMBUS', desk: 'VOLATILITY' })).toBe('desk=VOLATILITY/underlying=NIMBUS');
    expect(nodeKey({ tenor: '31-90d', book: 'B1', desk: 'D', underlying: 'U' })).toBe(
      'desk=D/book=B1/underlying=U/tenor=31-90d',
    );
    expect(nodeKey({ tenor: '366d+' })).toBe('tenor=366d+');
    expect(nodeKey({})).toBe('firm');
    expect(nodeKey({ desk: '', book: undefined })).toBe('firm');
  });

  it('parses back what it builds and refuses malformed keys', () => {
    const node = { desk: 'D', book: 'B1', underlying: 'U', tenor: '0-30d' };
    expect(parseNodeKey(nodeKey(node))).toEqual(node);
    expect(parseNodeKey('firm')).toEqual({});
    expect(() => parseNodeKey('book=B/desk=D')).toThrow(/malformed/);
    expect(() => parseNodeKey('desk=')).toThrow(/malformed/);
    expect(() => parseNodeKey('colour=red')).toThrow(/malformed/);
  });
});

describe('topics and bus keys (contract: keyed by underlying / currency / limitId)', () => {
  it('routes every input type', () => {
    const cases: [object, string, string][] = [
      [
        { type: 'underlying', underlying: 'NIMBUS', kind: 'equity', currency: 'USD', ts },
        TOPICS.refdata,
        'NIMBUS',
      ],
      [{ type: 'spot', underlying: 'NIMBUS', price: 1, ts }, TOPICS.spots, 'NIMBUS'],
      [
        { type: 'vol-surface', underlying: 'NIMBUS', ts, expiries: [ts], strikes: [100], vols: [[0.2]] },
        TOPICS.vols,
        'NIMBUS',
      ],
      [{ type: 'curve', currency: 'EUR', ts, tenors: [1], zeroRates: [0.02] }, TOPICS.curves, 'EUR'],
      [
        { type: 'trade', tradeId: 'T-1', version: 2, action: 'cancel', underlying: 'NIMBUS', ts },
        TOPICS.trades,
        'NIMBUS',
      ],
      [{ type: 'limit', limitId: 'L-1', scope: {}, metric: 'pv', max: 1, ts }, TOPICS.limits, 'L-1'],
      [{ type: 'limit-remove', limitId: 'L-1', ts }, TOPICS.limits, 'L-1'],
    ];
    for (const [line, topic, key] of cases) {
      const m = msg(line);
      expect(inputTopic(m), m.type).toBe(topic);
      expect(inputKey(m), m.type).toBe(key);
    }
  });
});

describe('tenor buckets (contract: floor of whole days; expired in 0-30d)', () => {
  const t0 = Date.UTC(2026, 2, 2);
  it('puts the boundaries where the contract puts them', () => {
    expect(tenorBucket(t0 - MS_PER_DAY, t0)).toBe('0-30d');
    expect(tenorBucket(t0 + 30 * MS_PER_DAY + MS_PER_DAY - 1, t0)).toBe('0-30d');
    expect(tenorBucket(t0 + 31 * MS_PER_DAY, t0)).toBe('31-90d');
    expect(tenorBucket(t0 + 90 * MS_PER_DAY, t0)).toBe('31-90d');
    expect(tenorBucket(t0 + 91 * MS_PER_DAY, t0)).toBe('91-180d');
    expect(tenorBucket(t0 + 181 * MS_PER_DAY, t0)).toBe('181-365d');
    expect(tenorBucket(t0 + 365 * MS_PER_DAY, t0)).toBe('181-365d');
    expect(tenorBucket(t0 + 366 * MS_PER_DAY, t0)).toBe('366d+');
  });
});
