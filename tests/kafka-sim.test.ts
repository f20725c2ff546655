// `keelson sim` on a real broker: malformed lines of the live feed reach a topic without a publish
// error (a compacted topic refuses keyless records), and the feed serves /healthz, /readyz and
// /metrics as docker-compose.yml expects of it.
import { spawn } from 'node:child_process';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { KafkaBus, ensureTopics, topicPlan } from '@keelson/bus';
import { MarketSim } from '@keelson/sim';
import { SimFeeder, routeMalformed } from '@keelson/runtime';
import { TOPICS, decodeInput, inputKey, inputTopic } from '@keelson/shared-types';
import { poisonSafe } from '../services/cli/src/commands/sim.ts';
import { findBroker, uniquePrefix } from './support/kafka.ts';

const broker = await findBroker();
const brokers = broker?.brokers ?? [];
const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');
const INPUTS = [TOPICS.refdata, TOPICS.vols, TOPICS.spots, TOPICS.curves, TOPICS.trades, TOPICS.limits];

async function until(
  what: string,
  ok: () => boolean | Promise<boolean>,
  timeoutMs: number,
  log?: () => string,
) {
  const deadline = Date.now() + timeoutMs;
  while (!(await ok())) {
    if (Date.now() > deadline)
      throw new Error(`timed out waiting for ${what}\n${log?.().slice(-3000) ?? ''}`);
    await new Promise((r) => setTimeout(r, 200));
  }
}

async function freshTopics(prefix: string, bus: KafkaBus): Promise<void> {
  const admin = bus.admin();
  await admin.connect();
  await ensureTopics(admin, prefix, topicPlan({ partitions: 3 }));
  await admin.disconnect();
}

describe.skipIf(!broker)('keelson sim on Kafka', () => {
  const buses: KafkaBus[] = [];
  afterAll(async () => {
    await Promise.allSettled(buses.map((b) => b.close()));
  });

  it('publishes every malformed line of the live feed, none refused, each where the engine reads it', async () => {
    const prefix = uniquePrefix('sim');
    const bus = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(bus);
    await freshTopics(prefix, bus);

    // The control: the broker does refuse a keyless record on a compacted input topic (the fault
    // being fixed), so the check below is not passing vacuously.
    await expect(bus.publish(TOPICS.spots, [{ key: null, value: '{"type":"spot"}' }])).rejects.toThrow();

    const deps = { decodeInput, inputKey, inputTopic, routeMalformed };
    const startMs = Date.now();
    // 6000 a minute: about one malformed line per 10 ms step, every breaker kind many times over.
    const source = new MarketSim({ seed: 11, startMs, underlyings: 6, trades: 20, malformedPerMinute: 6000 });
    const errors: unknown[] = [];
    let now = startMs;
    const feeder = new SimFeeder({
      source,
      bus: poisonSafe(bus, deps),
      clock: { now: () => now },
      onError: (e) => errors.push(e),
    });
    await feeder.publishBootstrap();
    for (let i = 0; i < 300; i++) {
      now += 10;
      await feeder.step();
    }
    const st = feeder.stats();
    expect(errors).toEqual([]);
    expect(st.malformed).toBeGreaterThan(100);

    // Read every input topic to its end: each malformed line is there once, invalid to the contract.
    const invalid: { topic: string; key: string | null }[] = [];
    let total = 0;
    const reader = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}reader` });
    buses.push(reader);
    await reader.subscribe(INPUTS, async (batch) => {
      for (const r of batch) {
        total++;
        if (!decodeInput(r.value).ok) invalid.push({ topic: r.topic, key: r.key });
      }
    });
    await until('every record', () => total >= st.published + st.malformed, 30_000);
    expect(total).toBe(st.published + st.malformed);
    expect(invalid.length).toBe(st.malformed);
    // Keyless ones only where deletion, not compaction, is the policy.
    for (const x of invalid) if (x.key === null) expect(x.topic).toBe(TOPICS.trades);
    // And some did need the re-route: malformed lines land on more topics than trades alone.
    expect(new Set(invalid.map((x) => x.topic)).size).toBeGreaterThan(1);
  }, 60_000);

  // The default universe's bootstrap (some 20 000 messages) is larger than one produce request may
  // be (message.max.bytes, 1 MiB by default): it has to go in several.
  it('publishes the default bootstrap and serves /healthz, /readyz and /metrics with --host/--port', async () => {
    const prefix = uniquePrefix('simhttp');
    const bus = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(bus);
    await freshTopics(prefix, bus);
    const child = spawn(
      process.execPath,
      [
        bin,
        'sim',
        '--brokers',
        brokers.join(','),
        '--topic-prefix',
        prefix,
        '--host',
        '127.0.0.1',
        '--port',
        '0',
        '--step-ms',
        '50',
        '--duration',
        '60',
      ],
      { stdio: ['ignore', 'pipe', 'pipe'] },
    );
    let log = '';
    child.stdout.on('data', (d: Buffer) => (log += d.toString()));
    child.stderr.on('data', (d: Buffer) => (log += d.toString()));
    const exited = new Promise<number | null>((r) => child.on('exit', (c) => r(c)));
    try {
      await until(
        'the http url',
        () => /sim http on (http:\S+)/.test(log),
        30_000,
        () => log,
      );
      const url = /sim http on (http:\S+)/.exec(log)![1]!;
      const health = await fetch(`${url}/healthz`);
      expect(health.status).toBe(200);
      await until(
        'ready',
        async () => (await fetch(`${url}/readyz`)).status === 200,
        30_000,
        () => log,
      );
      expect(log).toMatch(/published the bootstrap: \d{4,} messages/);
      const ready = (await (await fetch(`${url}/readyz`)).json()) as { ready: boolean; waitingFor: string[] };
      expect(ready).toMatchObject({ ready: true, waitingFor: [] });
      await until(
        'steps counted',
        async () =>
          /^keelson_sim_steps_total ([1-9]\d*)$/m.test(await (await fetch(`${url}/metrics`)).text()),
        10_000,
      );
      const text = await (await fetch(`${url}/metrics`)).text();
      expect(text).toMatch(/^# TYPE keelson_sim_published_messages_total counter$/m);
      expect(text).toMatch(/^keelson_sim_ready 1$/m);
      expect(text).toMatch(/^keelson_sim_publish_errors_total 0$/m);
      expect((await fetch(`${url}/nope`)).status).toBe(404);
      expect((await fetch(`${url}/healthz`, { method: 'POST' })).status).toBe(405);
    } finally {
      child.kill('SIGTERM');
    }
    expect(await exited).toBe(0);
    expect(log).not.toMatch(/publish failed/);
  }, 90_000);
});
