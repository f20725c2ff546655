import { describe, expect, it } from 'vitest';
import { MemoryBus } from '@keelson/bus';
import type { BusRecord } from '@keelson/bus';
import type { AlertMsg, ExposureMsg, RejectedMsg } from '@keelson/shared-types';
import { EngineRunner, type RunnerEngine, type Signal } from './runner.ts';

// A stand-in engine whose outputs are fully determined by its inputs, so the runner's own rules
// (ordering, coalescing, conflation, acknowledgement) can be checked exactly.
class FakeEngine implements RunnerEngine {
  ingested: string[] = [];
  decays = 0;
  private ex = new Map<string, ExposureMsg>();
  private alerts: Signal[] = [];
  private rejected: RejectedMsg[] = [];
  ingest(raw: string, source: string) {
    this.ingested.push(raw);
    let m: { type?: string; underlying?: string; price?: number; ts?: string; boom?: boolean };
    try {
      m = JSON.parse(raw);
    } catch {
      this.rejected.push({
        type: 'rejected',
        reason: 'invalid JSON',
        source,
        raw,
        ts: '2026-03-02T14:30:00Z',
      });
      return 'rejected' as const;
    }
    if (m.boom) throw new Error('kaboom');
    if (m.type === 'spot' && m.underlying) {
      const e = exposure(`underlying=${m.underlying}`, m.underlying, m.price ?? 0);
      this.ex.set(e.nodeKey, e);
      this.ex.set('firm', exposure('firm', undefined, m.price ?? 0));
      if ((m.price ?? 0) > 100) this.alerts.push(alert(m.underlying));
    }
    return 'accepted' as const;
  }
  revalueAll() {
    this.decays++;
  }
  drain() {
    const out = { exposures: [...this.ex.values()], alerts: this.alerts, rejected: this.rejected };
    this.ex = new Map();
    this.alerts = [];
    this.rejected = [];
    return out;
  }
  snapshot() {
    return [];
  }
}

function exposure(nodeKey: string, underlying: string | undefined, pv: number): ExposureMsg {
  return {
    type: 'exposure',
    nodeKey,
    node: underlying ? { underlying } : {},
    currency: 'USD',
    asOf: '2026-03-02T14:30:00Z',
    pv,
    pnl: 0,
    delta: underlying ? 1 : null,
    cashDelta: 0,
    gamma: underlying ? 0 : null,
    cashGamma: 0,
    vega: 0,
    theta: 0,
    rho: 0,
    positions: 1,
    unpriced: {},
    stale: false,
  };
}
function alert(u: string): AlertMsg {
  return {
    type: 'alert',
    alertId: `L-${u}#1`,
    limitId: `L-${u}`,
    nodeKey: `underlying=${u}`,
    metric: 'delta',
    value: 1,
    bound: 1,
    utilization: 1,
    severity: 'breach',
    previous: 'ok',
    state: 'raised',
    ts: '2026-03-02T14:30:00Z',
  };
}
const spot = (u: string, price: number, tsMs: number) => ({
  key: u,
  value: JSON.stringify({ type: 'spot', underlying: u, price, ts: new Date(tsMs).toISOString() }),
});

function collect(bus: MemoryBus, topics: string[]) {
  const got: BusRecord[] = [];
  void bus.subscribe(topics, async (b) => void got.push(...b));
  return got;
}

describe('EngineRunner', () => {
  it('conflates spots, publishes alerts at once and coalesces exposures per node within the interval', async () => {
    let now = 1_000_000;
    const bus = new MemoryBus();
    const engine = new FakeEngine();
    const out = collect(bus, ['exposures', 'alerts', 'rejected']);
    const observed: string[] = [];
    const runner = new EngineRunner({
      engine,
      bus,
      publishIntervalMs: 100,
      now: () => now,
      observer: { input: (t, o, n = 1) => observed.push(`${t}:${o}:${n}`) },
    });
    await runner.start();
    // First batch: the flush is due at once (nothing published yet).
    await bus.publish('spots', [spot('AX', 10, now - 5), spot('AX', 11, now - 4), spot('AX', 101, now - 3)]);
    await bus.idle();
    expect(engine.ingested.length).toBe(1); // only the newest AX spot was applied
    expect(observed).toEqual(['spot:accepted:2']); // the two conflated ones still count, in one call
    expect(out.filter((r) => r.topic === 'alerts').map((r) => r.key)).toEqual(['L-AX']);
    expect(out.filter((r) => r.topic === 'exposures').map((r) => r.key)).toEqual(['underlying=AX', 'firm']);
    // Two more batches inside the interval: held, then one publication with the latest values.
    now += 10;
    await bus.publish('spots', [spot('AX', 20, now)]);
    await bus.idle();
    now += 10;
    await bus.publish('spots', [spot('BY', 30, now)]);
    await bus.idle();
    expect(out.filter((r) => r.topic === 'exposures')).toHaveLength(2);
    now += 100;
    await runner.flushNow();
    await bus.idle();
    const second = out.filter((r) => r.topic === 'exposures').slice(2);
    expect(second.map((r) => [r.key, JSON.parse(r.value).pv])).toEqual([
      ['underlying=AX', 20],
      ['underlying=BY', 30],
      ['firm', 30],
    ]);
    expect(runner.stats()).toMatchObject({
      records: 5,
      spots: 5,
      conflated: 2,
      accepted: 5,
      alertsPublished: 1,
    });
    // Tick-to-publish: the first batch's ticks waited 3 to 5 ms, the later ones 110 and 100 ms.
    expect(runner.latency.percentiles([0, 1])).toEqual([3, 110]);
    await runner.stop();
    await bus.close();
  });

  it('adapts the interval between minPublishIntervalMs and publishIntervalMs to the cost of a flush', async () => {
    let now = 1_000_000;
    let publishCostMs = 0;
    // A bus whose exposure publication takes `publishCostMs` of (fake) wall time to be acknowledged.
    class SlowBus extends MemoryBus {
      override async publish(topic: string, recs: { key: string | null; value: string }[]): Promise<void> {
        if (topic === 'exposures') now += publishCostMs;
        return super.publish(topic, recs);
      }
    }
    const bus = new SlowBus();
    const engine = new FakeEngine();
    const out = collect(bus, ['exposures']);
    const runner = new EngineRunner({
      engine,
      bus,
      publishIntervalMs: 100,
      minPublishIntervalMs: 5,
      now: () => now,
    });
    await runner.start();
    const published = () => out.filter((r) => r.topic === 'exposures').length;
    await bus.publish('spots', [spot('AX', 10, now)]);
    await bus.idle();
    expect(published()).toBe(2);
    // Cheap flushes: 10 ms later is past the 5 ms floor, so it goes at once (a fixed 100 ms would hold it).
    now += 10;
    publishCostMs = 30;
    await bus.publish('spots', [spot('AX', 11, now)]);
    await bus.idle();
    expect(published()).toBe(4);
    // That flush took 30 ms: the next waits 30 / 0.2 = 150 ms, capped at publishIntervalMs.
    now += 50;
    await bus.publish('spots', [spot('AX', 12, now)]);
    await bus.idle();
    expect(published()).toBe(4);
    now += 60; // 110 ms after the slow flush began: due, one flush with the latest values
    await bus.publish('spots', [spot('AX', 13, now)]);
    await bus.idle();
    expect(published()).toBe(6);
    await runner.stop();
    await bus.close();
  });

  it('resolves the batch only after alerts and rejected are acknowledged', async () => {
    const bus = new MemoryBus({ queueCapacity: 1 });
    const engine = new FakeEngine();
    let releaseAlerts!: () => void;
    const gate = new Promise<void>((r) => (releaseAlerts = r));
    await bus.subscribe(['alerts'], async () => gate); // a slow alerts consumer
    const runner = new EngineRunner({ engine, bus, publishIntervalMs: 0 });
    const handled = runner.handle([
      {
        topic: 'spots',
        key: 'AX',
        value: JSON.stringify({ type: 'spot', underlying: 'AX', price: 150, ts: '2026-03-02T14:30:00Z' }),
      },
      {
        topic: 'spots',
        key: 'BY',
        value: JSON.stringify({ type: 'spot', underlying: 'BY', price: 150, ts: '2026-03-02T14:30:00Z' }),
      },
    ]);
    let done = false;
    void handled.then(() => (done = true));
    await new Promise((r) => setTimeout(r, 20));
    expect(done).toBe(false); // two alerts, room for one: the publish is not acknowledged yet
    releaseAlerts();
    await handled;
    expect(done).toBe(true);
    await bus.close();
  });

  it('dead-letters a record the engine throws on and carries on with the batch', async () => {
    const bus = new MemoryBus();
    const engine = new FakeEngine();
    const out = collect(bus, ['rejected']);
    const errors: string[] = [];
    const runner = new EngineRunner({
      engine,
      bus,
      onError: (e, ctx) => errors.push(`${ctx}: ${String(e)}`),
    });
    await runner.handle([
      { topic: 'trades', key: 'AX', value: '{"boom":true}', partition: 2, offset: '41' },
      { topic: 'trades', key: 'AX', value: 'garbage', partition: 2, offset: '42' },
      {
        topic: 'spots',
        key: 'AX',
        value: JSON.stringify({ type: 'spot', underlying: 'AX', price: 1, ts: '2026-03-02T14:30:00Z' }),
      },
    ]);
    await bus.idle();
    const dead = out.map((r) => JSON.parse(r.value));
    expect(dead.map((d) => [d.source, d.reason])).toEqual([
      ['trades partition 2 offset 42', 'invalid JSON'],
      ['trades partition 2 offset 41', 'internal error while applying: kaboom'],
    ]);
    expect(errors).toEqual(['ingest trades partition 2 offset 41: Error: kaboom']);
    expect(engine.ingested).toHaveLength(3);
    await bus.close();
  });

  it('hands consecutive spots to ingestSpots as one run; other inputs end the run and go alone', async () => {
    const bus = new MemoryBus();
    const runs: number[] = [];
    const engine = new FakeEngine();
    const grouped = Object.assign(engine, {
      ingestSpots(items: readonly { raw: string; source: string }[]) {
        runs.push(items.length);
        return items.map((x) => engine.ingest(x.raw, x.source));
      },
    });
    const runner = new EngineRunner({ engine: grouped, bus, publishIntervalMs: 0 });
    await runner.handle([
      { topic: 'spots', ...spot('AX', 1, 1000) },
      { topic: 'spots', ...spot('BX', 1, 1000) },
      {
        topic: 'trades',
        key: 'AX',
        value: JSON.stringify({
          type: 'trade',
          tradeId: 'T-1',
          version: 1,
          action: 'cancel',
          underlying: 'AX',
          ts: '2026-03-02T14:30:00Z',
        }),
      },
      { topic: 'spots', ...spot('CX', 1, 1000) },
      { topic: 'spots', ...spot('AX', 2, 1001) },
      { topic: 'spots', ...spot('DX', 2, 1001) },
    ]);
    expect(runs).toEqual([2, 3]);
    expect(runner.stats()).toMatchObject({ accepted: 6, spots: 5 });
    await bus.close();
  });

  it('when a run throws, applies its spots one by one and dead-letters only the faulty one', async () => {
    const bus = new MemoryBus();
    const out = collect(bus, ['rejected']);
    const engine = new FakeEngine();
    const grouped = Object.assign(engine, {
      ingestSpots(): never {
        throw new Error('kaboom in a run');
      },
    });
    const runner = new EngineRunner({ engine: grouped, bus, publishIntervalMs: 0, onError: () => undefined });
    const boom = {
      key: 'BX',
      value: JSON.stringify({ type: 'spot', underlying: 'BX', boom: true, ts: '2026-03-02T14:30:00Z' }),
    };
    await runner.handle([
      { topic: 'spots', ...spot('AX', 1, 1000) },
      { topic: 'spots', partition: 0, offset: '8', ...boom },
      { topic: 'spots', ...spot('CX', 1, 1000) },
    ]);
    await bus.idle();
    expect(out.map((r) => JSON.parse(r.value).source)).toEqual(['spots partition 0 offset 8']);
    expect(runner.stats()).toMatchObject({ accepted: 2, rejected: 1, internalErrors: 1 });
    await bus.close();
  });

  it('handleUntilAcked returns at once, and its acknowledgement waits for the flush that carries it', async () => {
    let now = 0;
    const bus = new MemoryBus();
    const engine = new FakeEngine();
    const runner = new EngineRunner({ engine, bus, publishIntervalMs: 30, now: () => now });
    const first = await runner.handleUntilAcked([
      { topic: 'spots', key: 'AX', value: spot('AX', 1, 0).value },
    ]);
    await first.outputsAcked; // due at once
    expect(runner.stats().exposuresPublished).toBe(2);
    now = 5;
    const second = await runner.handleUntilAcked([
      { topic: 'spots', key: 'AX', value: spot('AX', 2, 5).value },
    ]);
    let acked = false;
    void second.outputsAcked.then(() => (acked = true));
    await new Promise((r) => setTimeout(r, 5));
    // kept for the flush: neither applied nor published yet, and the handler did not wait for it
    expect(acked).toBe(false);
    expect(engine.ingested).toHaveLength(1);
    expect(runner.stats().exposuresPublished).toBe(2);
    now = 40;
    await second.outputsAcked; // the flush timer (25 ms of real time) applies, publishes, releases it
    expect(engine.ingested).toHaveLength(2);
    expect(runner.stats().exposuresPublished).toBe(4);
    await bus.close();
  });

  it('a failed flush keeps its exposures and acknowledgements and is retried', async () => {
    let now = 0;
    const bus = new MemoryBus();
    let failures = 1;
    const publish = bus.publish.bind(bus);
    bus.publish = async (topic, records) => {
      if (topic === 'exposures' && failures-- > 0) throw new Error('broker away');
      return publish(topic, records);
    };
    const errors: string[] = [];
    const runner = new EngineRunner({
      engine: new FakeEngine(),
      bus,
      publishIntervalMs: 20,
      now: () => now,
      onError: (err, context) => errors.push(`${context}: ${(err as Error).message}`),
    });
    const got = await runner.handleUntilAcked([{ topic: 'spots', key: 'AX', value: spot('AX', 1, 0).value }]);
    let acked = false;
    void got.outputsAcked.then(() => (acked = true));
    await new Promise((r) => setTimeout(r, 5));
    expect(errors).toEqual(['exposure flush: broker away']);
    expect(acked).toBe(false);
    // a tick arriving while the failed flush waits for its retry
    now = 10;
    const later = await runner.handleUntilAcked([{ topic: 'spots', ...spot('BX', 2, 10) }]);
    now = 25;
    await got.outputsAcked; // the retry one interval later carries them
    await later.outputsAcked;
    // AX's node, BX's node and the node they share, once each (latest wins)
    expect(runner.stats().exposuresPublished).toBe(3);
    // both ticks' latencies, to the retry that published them: 25 - 0 and 25 - 10 ms
    expect(runner.latency.count).toBe(2);
    expect(runner.latency.percentiles([0, 1])).toEqual([15, 25]);
    await bus.close();
  });

  it('runs the decay clock: revalueAll on its interval', async () => {
    const bus = new MemoryBus();
    const engine = new FakeEngine();
    const runner = new EngineRunner({ engine, bus, decayIntervalMs: 10 });
    await runner.start();
    await new Promise((r) => setTimeout(r, 55));
    await runner.stop();
    expect(engine.decays).toBeGreaterThanOrEqual(3);
    expect(runner.stats().decayRuns).toBe(engine.decays);
    await bus.close();
  });
});
