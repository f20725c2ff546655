import { describe, expect, it } from 'vitest';
import { MemoryBus, BusClosedError } from './memory.ts';
import type { BusRecord } from './bus.ts';

const recs = (n: number, key: (i: number) => string | null = () => null) =>
  Array.from({ length: n }, (_, i) => ({ key: key(i), value: String(i) }));

describe('MemoryBus', () => {
  it('delivers every record once, in publish order, asynchronously', async () => {
    const bus = new MemoryBus({ maxBatch: 7 });
    const seen: string[] = [];
    await bus.subscribe(['a'], async (batch) => {
      for (const r of batch) seen.push(r.value);
    });
    const p = bus.publish('a', recs(50));
    expect(seen).toEqual([]); // nothing is handed over synchronously
    await p;
    await bus.idle();
    expect(seen).toEqual(Array.from({ length: 50 }, (_, i) => String(i)));
  });

  it('hands one batch at a time to a subscription, never overlapping', async () => {
    const bus = new MemoryBus({ maxBatch: 3 });
    let active = 0;
    let maxActive = 0;
    const sizes: number[] = [];
    await bus.subscribe(['a'], async (batch) => {
      active++;
      maxActive = Math.max(maxActive, active);
      sizes.push(batch.length);
      await new Promise((r) => setTimeout(r, 2));
      active--;
    });
    await bus.publish('a', recs(10));
    await bus.idle();
    expect(maxActive).toBe(1);
    expect(sizes.reduce((a, b) => a + b, 0)).toBe(10);
    expect(Math.max(...sizes)).toBeLessThanOrEqual(3);
  });

  it('assigns partitions by key hash and offsets per partition, the same key always together', async () => {
    const bus = new MemoryBus({ partitions: { spots: 4 } });
    const got: BusRecord[] = [];
    await bus.subscribe(['spots', 'trades'], async (b) => void got.push(...b));
    await bus.publish(
      'spots',
      recs(40, (i) => `U${i % 5}`),
    );
    await bus.publish(
      'trades',
      recs(3, () => 'U1'),
    );
    await bus.idle();
    const byKey = new Map<string, Set<number>>();
    for (const r of got.filter((r) => r.topic === 'spots')) {
      const set = byKey.get(r.key!) ?? new Set();
      set.add(r.partition!);
      byKey.set(r.key!, set);
    }
    for (const set of byKey.values()) expect(set.size).toBe(1);
    // offsets run 0,1,2,... within each partition, in publish order
    const perPartition = new Map<number, number[]>();
    for (const r of got.filter((r) => r.topic === 'spots')) {
      const l = perPartition.get(r.partition!) ?? [];
      l.push(Number(r.offset));
      perPartition.set(r.partition!, l);
    }
    for (const l of perPartition.values()) expect(l).toEqual(l.map((_, i) => i));
    expect(got.filter((r) => r.topic === 'trades').map((r) => r.partition)).toEqual([0, 0, 0]);
    expect(got.every((r) => typeof r.timestamp === 'number')).toBe(true);
  });

  it('makes publish wait while a subscriber queue is full and drops nothing', async () => {
    const bus = new MemoryBus({ queueCapacity: 5, maxBatch: 2 });
    let release!: () => void;
    const gate = new Promise<void>((r) => (release = r));
    const seen: string[] = [];
    await bus.subscribe(['a'], async (batch) => {
      await gate;
      for (const r of batch) seen.push(r.value);
    });
    let acked = false;
    const p = bus.publish('a', recs(12)).then(() => (acked = true));
    await new Promise((r) => setTimeout(r, 20));
    expect(acked).toBe(false); // 12 records cannot fit a 5-record queue behind a stuck handler
    expect(bus.stats().queued).toBe(5);
    release();
    await p;
    await bus.idle();
    expect(seen).toEqual(Array.from({ length: 12 }, (_, i) => String(i)));
  });

  it('acknowledges a publish only once every subscriber holds the records', async () => {
    const bus = new MemoryBus({ queueCapacity: 2, maxBatch: 1 });
    const fast: string[] = [];
    const slow: string[] = [];
    let release!: () => void;
    const gate = new Promise<void>((r) => (release = r));
    await bus.subscribe(['a'], async (b) => void fast.push(...b.map((r) => r.value)));
    await bus.subscribe(['a'], async (b) => {
      await gate;
      slow.push(...b.map((r) => r.value));
    });
    let acked = false;
    const p = bus.publish('a', recs(6)).then(() => (acked = true));
    await new Promise((r) => setTimeout(r, 20));
    expect(acked).toBe(false);
    release();
    await p;
    await bus.idle();
    expect(fast).toEqual(['0', '1', '2', '3', '4', '5']);
    expect(slow).toEqual(['0', '1', '2', '3', '4', '5']);
  });

  it('keeps concurrent publishes to one topic in call order', async () => {
    const bus = new MemoryBus({ queueCapacity: 3, maxBatch: 2 });
    const seen: string[] = [];
    await bus.subscribe(['a'], async (b) => {
      await new Promise((r) => setTimeout(r, 1));
      seen.push(...b.map((r) => r.value));
    });
    const a = bus.publish('a', [
      { key: null, value: 'a1' },
      { key: null, value: 'a2' },
      { key: null, value: 'a3' },
      { key: null, value: 'a4' },
    ]);
    const b = bus.publish('a', [{ key: null, value: 'b1' }]);
    await Promise.all([a, b]);
    await bus.idle();
    expect(seen).toEqual(['a1', 'a2', 'a3', 'a4', 'b1']);
  });

  it('lets a handler publish to another topic without deadlock when that queue is bounded', async () => {
    const bus = new MemoryBus({ queueCapacity: 4, maxBatch: 4 });
    const out: string[] = [];
    await bus.subscribe(['in'], async (b) => {
      await bus.publish(
        'out',
        b.map((r) => ({ key: null, value: `o${r.value}` })),
      );
    });
    await bus.subscribe(['out'], async (b) => void out.push(...b.map((r) => r.value)));
    await bus.publish('in', recs(20));
    await bus.idle();
    expect(out).toEqual(Array.from({ length: 20 }, (_, i) => `o${i}`));
  });

  it('stops a subscription whose handler fails and reports the failed batch', async () => {
    const errors: unknown[] = [];
    const bus = new MemoryBus({
      maxBatch: 2,
      onHandlerError: (e, batch) => errors.push([String(e), batch.length]),
    });
    let calls = 0;
    await bus.subscribe(['a'], async () => {
      calls++;
      throw new Error('boom');
    });
    await bus.publish('a', recs(5));
    await new Promise((r) => setTimeout(r, 10));
    expect(calls).toBe(1);
    expect(errors).toEqual([['Error: boom', 2]]);
    expect(bus.stats().queued).toBe(5); // the failed batch and the rest are still held
  });

  it('fails waiting publishes on close and refuses new ones', async () => {
    const bus = new MemoryBus({ queueCapacity: 1 });
    await bus.subscribe(['a'], () => new Promise(() => {})); // a handler that never finishes
    const p = bus.publish('a', recs(3));
    await new Promise((r) => setTimeout(r, 5));
    const closing = bus.close();
    await expect(p).rejects.toBeInstanceOf(BusClosedError);
    await expect(bus.publish('a', recs(1))).rejects.toBeInstanceOf(BusClosedError);
    void closing; // the stuck handler keeps close() pending; that is the handler's doing
  });

  it('counts records on a topic nobody reads', async () => {
    const bus = new MemoryBus();
    await bus.publish('nobody', recs(3));
    expect(bus.stats()).toMatchObject({ published: 3, unread: 3, queued: 0 });
  });
});
