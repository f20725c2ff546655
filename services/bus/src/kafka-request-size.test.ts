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
});
