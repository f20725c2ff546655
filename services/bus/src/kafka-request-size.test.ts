import { describe, expect, it } from 'vitest';
import { MAX_REQUEST_BYTES, requestSized } from './kafka.ts';

describe('requestSized', () => {
  it('cuts in order under the byte bound, and never splits or drops a record', () => {
    const recs = Array.from({ length: 5000 }, (_, i) => ({ key: `K${i}`, value: 'x'.repeat(400) }));
    const parts = requestSized(recs);
    expect(parts.flat()).toEqual(recs);
    expect(parts.length).toBeGreaterThan(1);
    for (const p of parts) {
      const bytes = p.reduce((n, r) => n + (r.value.length + r.key.length) * 3 + 64, 0);
      expect(bytes).toBeLessThanOrEqual(MAX_REQUEST_BYTES);
    }
  });

  it('a record larger than the bound goes alone; the empty list gives no request', () => {
    const big = { key: null, value: 'y'.repeat(300_000) };
    expect(
      requestSized([{ key: 'a', value: '1' }, big, { key: 'b', value: '2' }]).map((p) => p.length),
    ).toEqual([1, 1, 1]);
    expect(requestSized([])).toEqual([]);
  });

  it('bounds each partition, not the request: records spread over partitions share one request', () => {
    const recs = Array.from({ length: 1200 }, (_, i) => ({
      key: `underlying=U${i}`,
      value: 'x'.repeat(400),
    }));
    const size = (r: { key: string; value: string }) => (r.value.length + r.key.length) * 3 + 64;
    // a whole-request bound needs three requests for these ~1.5 MB of bound ...
    expect(requestSized(recs).length).toBe(3);
    // ... six partitions hold ~250 KB each: one request
    const partitionOf = (r: { key: string }) => Number(r.key.slice('underlying=U'.length)) % 6;
    expect(requestSized(recs, MAX_REQUEST_BYTES, partitionOf)).toEqual([recs]);
    // one partition only: cut where that partition's batch would pass the bound
    const parts = requestSized(recs, MAX_REQUEST_BYTES, () => 0);
    expect(parts.flat()).toEqual(recs);
    for (const p of parts) expect(p.reduce((n, r) => n + size(r), 0)).toBeLessThanOrEqual(MAX_REQUEST_BYTES);
  });

  it('counts a record of unknown partition (-1: unkeyed) against every partition', () => {
    // each about 0.375 of the bound (UTF-16 length x 3)
    const half = { key: 'a', value: 'x'.repeat(Math.floor(MAX_REQUEST_BYTES / 8)) };
    const other = { key: 'b', value: half.value };
    const unkeyed = { key: null, value: half.value };
    const partitionOf = (r: { key: string | null }) => (r.key === null ? -1 : r.key === 'a' ? 0 : 1);
    // a and b sit in different partitions: together they fit; an unkeyed one lands on top of each
    expect(requestSized([half, other], MAX_REQUEST_BYTES, partitionOf)).toHaveLength(1);
    expect(
      requestSized([half, other, unkeyed, unkeyed], MAX_REQUEST_BYTES, partitionOf).map((p) => p.length),
    ).toEqual([3, 1]);
  });
});
