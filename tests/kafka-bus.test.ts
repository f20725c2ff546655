// The kafkajs transport against a real broker (see tests/support/kafka.ts for where it comes from).
import { spawn } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import kafkajs from 'kafkajs';
import { KafkaBus, ensureTopics, topicPlan, waitForTopics } from '@keelson/bus';
import type { BusRecord, KafkaBusLogger, RebalanceEvent } from '@keelson/bus';
import { run as topicsCommand } from '../services/cli/src/commands/topics.ts';
import { findBroker, findSaslBroker, runLocalKafka, uniquePrefix } from './support/kafka.ts';

const broker = await findBroker();
const brokers = broker?.brokers ?? [];

/**
 * Kafka's murmur2 (the Java client's Utils.murmur2, seed 0x9747b28c), written here from the
 * published algorithm rather than taken from kafkajs, so the test checks kafkajs against it.
 */
function murmur2(data: Uint8Array): number {
  const m = 0x5bd1e995;
  const r = 24;
  const length = data.length;
  let h = (0x9747b28c ^ length) | 0;
  const whole = length & ~3;
  for (let i = 0; i < whole; i += 4) {
    let k =
      (data[i]! & 0xff) |
      ((data[i + 1]! & 0xff) << 8) |
      ((data[i + 2]! & 0xff) << 16) |
      ((data[i + 3]! & 0xff) << 24);
    k = Math.imul(k, m);
    k ^= k >>> r;
    k = Math.imul(k, m);
    h = Math.imul(h, m);
    h ^= k;
  }
  // The Java source's switch with fall-through over the 1..3 trailing bytes.
  const tail = length & 3;
  if (tail >= 3) h ^= (data[whole + 2]! & 0xff) << 16;
  if (tail >= 2) h ^= (data[whole + 1]! & 0xff) << 8;
  if (tail >= 1) {
    h ^= data[whole]! & 0xff;
    h = Math.imul(h, m);
  }
  h ^= h >>> 13;
  h = Math.imul(h, m);
  h ^= h >>> 15;
  return h | 0;
}

/** Kafka's DefaultPartitioner for a keyed record (common knowledge): toPositive(murmur2) % n. */
function javaPartition(key: string, partitions: number): number {
  return (murmur2(new TextEncoder().encode(key)) & 0x7fffffff) % partitions;
}

async function until<T>(what: string, get: () => T | undefined | false, timeoutMs = 20_000): Promise<T> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    const v = get();
    if (v !== undefined && v !== false) return v;
    if (Date.now() > deadline) throw new Error(`timed out waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

function admin(prefixBrokers = brokers) {
  return new kafkajs.Kafka({
    clientId: 'keelson-test-admin',
    brokers: prefixBrokers,
    logLevel: kafkajs.logLevel.NOTHING,
  }).admin();
}

function memoryIo() {
  let out = '';
  let err = '';
  const sink = (f: (s: string) => void) =>
    ({ write: (s: string) => (f(s), true) }) as unknown as NodeJS.WritableStream;
  return {
    io: { stdin: process.stdin, stdout: sink((s) => (out += s)), stderr: sink((s) => (err += s)) },
    out: () => out,
    err: () => err,
  };
}

describe('murmur2 as written in this test', () => {
  // Values from Kafka's own UtilsTest.testMurmur2 (quoted from memory of the Apache Kafka source).
  it.each([
    ['21', -973932308],
    ['foobar', -790332482],
    ['a-little-bit-long-string', -985981536],
    ['a-little-bit-longer-string', -1486304829],
    ['lkjh234lh9fiuh90y23oiuhsafujhadof229phr9h19h89h8', -58897971],
    ['abc', 479470107],
  ])('murmur2(%s) = %i', (key, expected) => {
    expect(murmur2(new TextEncoder().encode(key))).toBe(expected);
  });
});

describe.skipIf(!broker)('KafkaBus on a real broker', () => {
  const buses: KafkaBus[] = [];
  const prefixes: string[] = [];
  const newBus = (opts: ConstructorParameters<typeof KafkaBus>[0] = {}) => {
    const bus = new KafkaBus({ brokers, env: {}, ...opts });
    buses.push(bus);
    return bus;
  };
  const withTopics = async (partitions = 6) => {
    const prefix = uniquePrefix();
    prefixes.push(prefix);
    const a = admin();
    await a.connect();
    await ensureTopics(a, prefix, topicPlan({ partitions }));
    await a.disconnect();
    return prefix;
  };

  afterAll(async () => {
    await Promise.allSettled(buses.map((b) => b.close()));
    const a = admin();
    await a.connect();
    const all = await a.listTopics();
    const mine = all.filter((t) => prefixes.some((p) => t.startsWith(p)));
    if (mine.length) await a.deleteTopics({ topics: mine }).catch(() => undefined);
    await a.disconnect();
  });

  it('round-trips records with their keys on the partitions the Java partitioner picks', async () => {
    const prefix = await withTopics(6);
    const events: RebalanceEvent[] = [];
    const got: BusRecord[] = [];
    const consumer = newBus({
      topicPrefix: prefix,
      groupId: `${prefix}g`,
      onRebalance: (e) => events.push(e),
    });
    await consumer.subscribe(['spots'], async (batch) => void got.push(...batch));

    const producer = newBus({ topicPrefix: prefix });
    const keys = Array.from({ length: 60 }, (_, i) => `UNDERLYING-${i}`);
    const before = Date.now();
    // Two rounds, so per-key order is observable.
    for (const round of [1, 2]) {
      await producer.publish(
        'spots',
        keys.map((k) => ({
          key: k,
          value: JSON.stringify({ type: 'spot', underlying: k, price: round, ts: '2026-03-02T14:30:00Z' }),
        })),
      );
    }
    await until('120 records', () => got.length >= 120);
    expect(got).toHaveLength(120);

    for (const r of got) {
      expect(r.topic).toBe('spots'); // logical name: the prefix is stripped
      expect(r.partition).toBe(javaPartition(r.key!, 6));
      expect(JSON.parse(r.value).underlying).toBe(r.key);
      expect(r.offset).toMatch(/^\d+$/);
      expect(r.timestamp).toBeGreaterThanOrEqual(before - 1000);
      expect(r.timestamp).toBeLessThanOrEqual(Date.now() + 1000);
    }
    // The 60 keys spread over several partitions (else the check above proves little).
    expect(new Set(got.map((r) => r.partition)).size).toBeGreaterThan(3);
    for (const k of keys) {
      const prices = got.filter((r) => r.key === k).map((r) => JSON.parse(r.value).price);
      expect(prices).toEqual([1, 2]);
    }

    const assigned = events.filter((e) => e.kind === 'assigned');
    expect(assigned.at(-1)).toEqual({
      kind: 'assigned',
      groupId: `${prefix}g`,
      assignment: [{ topic: 'spots', partitions: [0, 1, 2, 3, 4, 5] }],
    });
    expect(consumer.connected).toBe(true);
    expect(producer.connected).toBe(true);
    expect(consumer.status().consumers[0]).toMatchObject({ state: 'joined', topics: ['spots'] });
  });

  it('pauses and resumes a subscription without losing records', async () => {
    const prefix = await withTopics(1);
    const got: BusRecord[] = [];
    const bus = newBus({ topicPrefix: prefix, groupId: `${prefix}g` });
    await bus.subscribe(['trades'], async (batch) => void got.push(...batch));
    await bus.publish('trades', [{ key: 'A', value: 'first' }]);
    await until('first record', () => got.length === 1);

    bus.pause();
    await bus.publish('trades', [{ key: 'A', value: 'second' }]);
    await new Promise((r) => setTimeout(r, 1500));
    expect(got).toHaveLength(1);
    bus.resume();
    await until('second record', () => got.length === 2);
    expect(got.map((r) => r.value)).toEqual(['first', 'second']);
  });

  it('comes back from a crash kafkajs will not restart, and reads the uncommitted batch again', async () => {
    // kafkajs restarts a crashed consumer only for errors it deems retriable; a non-retriable one
    // (as "Failed to find group coordinator" while a broker goes down) would leave it dead.
    const prefix = await withTopics(1);
    const got: string[] = [];
    const warnings: string[] = [];
    const logger: KafkaBusLogger = {
      debug: () => undefined,
      info: () => undefined,
      warn: (_o, m) => void warnings.push(m),
      error: () => undefined,
    };
    const bus = newBus({ topicPrefix: prefix, groupId: `${prefix}g`, logger });
    let thrown = false;
    await bus.subscribe(['trades'], async (batch) => {
      if (!thrown) {
        thrown = true;
        throw new kafkajs.KafkaJSNonRetriableError('a crash kafkajs does not restart');
      }
      for (const r of batch) got.push(r.value);
    });
    await bus.publish('trades', [
      { key: 'A', value: 'one' },
      { key: 'A', value: 'two' },
    ]);
    await until('the batch, read again by the replacement consumer', () => got.length >= 2, 30_000);
    expect(got).toEqual(['one', 'two']);
    expect(warnings).toContain('kafka consumer replaced after a crash');
    await until('connected again', () => bus.connected, 15_000);
    await bus.publish('trades', [{ key: 'A', value: 'three' }]);
    await until('a later record', () => got.includes('three'), 15_000);
  });

  it('commits a batch only after its handler resolves: a consumer that dies first leaves it to the next', async () => {
    const prefix = await withTopics(1);
    const groupId = `${prefix}g`;
    const producer = newBus({ topicPrefix: prefix });
    await producer.publish(
      'trades',
      Array.from({ length: 5 }, (_, i) => ({ key: 'NIMBUS', value: `event-${i}` })),
    );

    // A separate process takes the batch and is killed (SIGKILL) while its handler is pending.
    const childCode = `
      import { KafkaBus } from '@keelson/bus';
      const bus = new KafkaBus({ brokers: ${JSON.stringify(brokers)}, env: {}, topicPrefix: ${JSON.stringify(prefix)},
        groupId: ${JSON.stringify(groupId)}, sessionTimeoutMs: 6000, heartbeatIntervalMs: 1000 });
      await bus.subscribe(['trades'], (batch) => {
        process.stdout.write('got ' + batch.length + '\\n');
        return new Promise(() => {}); // never acknowledged
      });
    `;
    const child = spawn(process.execPath, ['--import', 'tsx', '--input-type=module', '-e', childCode], {
      cwd: process.cwd(),
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    let childOut = '';
    child.stdout.on('data', (d: Buffer) => (childOut += d.toString()));
    child.stderr.on('data', (d: Buffer) => (childOut += d.toString()));
    const exited = new Promise((r) => child.on('exit', r));
    await until('the child to receive the batch', () => /got 5/.test(childOut), 30_000);
    child.kill('SIGKILL');
    await exited;

    const a = admin();
    await a.connect();
    const committed = await a.fetchOffsets({ groupId, topics: [`${prefix}trades`] });
    // -1: the group has committed nothing for the partition.
    expect(committed[0]!.partitions[0]!.offset).toBe('-1');

    // Same group again: once the dead member's session lapses, the whole batch comes back.
    const got: BusRecord[] = [];
    const again = newBus({ topicPrefix: prefix, groupId, sessionTimeoutMs: 6000, heartbeatIntervalMs: 1000 });
    await again.subscribe(['trades'], async (batch) => void got.push(...batch));
    await until('the batch again', () => got.length >= 5, 45_000);
    expect(got.map((r) => r.value)).toEqual(['event-0', 'event-1', 'event-2', 'event-3', 'event-4']);
    expect(got.map((r) => r.offset)).toEqual(['0', '1', '2', '3', '4']);

    // And this time it is committed: the next offset to read is 5.
    let offset = '';
    const deadline = Date.now() + 10_000;
    while (Date.now() < deadline) {
      const o = await a.fetchOffsets({ groupId, topics: [`${prefix}trades`] });
      offset = o[0]!.partitions[0]!.offset;
      if (offset === '5') break;
      await new Promise((r) => setTimeout(r, 200));
    }
    expect(offset).toBe('5');
    await a.disconnect();
  }, 90_000);

  it('keelson topics creates every topic once, compacted where state is kept, and reports on a rerun', async () => {
    const prefix = uniquePrefix();
    prefixes.push(prefix);
    const first = memoryIo();
    expect(
      await topicsCommand(
        ['--brokers', brokers.join(','), '--topic-prefix', prefix, '--partitions', '4'],
        first.io,
      ),
    ).toBe(0);
    expect(first.out()).toMatch(/10 created, 0 already there/);

    const second = memoryIo();
    expect(
      await topicsCommand(['--brokers', brokers.join(','), '--topic-prefix', prefix, '--json'], second.io),
    ).toBe(0);
    const report = JSON.parse(second.out()) as {
      topics: {
        topic: string;
        status: string;
        partitions: number;
        configs: Record<string, string>;
        notes: string[];
      }[];
    };
    expect(report.topics.map((t) => t.status)).toEqual(Array(10).fill('exists'));
    // The rerun asked for the default 6 partitions; the topics keep their 4 and the difference is a note.
    expect(report.topics.find((t) => t.topic === `${prefix}spots`)?.notes).toEqual([
      'has 4 partitions, the plan says 6',
    ]);

    const a = admin();
    await a.connect();
    const names = [
      'refdata',
      'spots',
      'vols',
      'curves',
      'trades',
      'limits',
      'exposures',
      'alerts',
      'rejected',
      'partials',
    ];
    const meta = await a.fetchTopicMetadata({ topics: names.map((n) => prefix + n) });
    const partitions = Object.fromEntries(
      meta.topics.map((t) => [t.name.slice(prefix.length), t.partitions.length]),
    );
    expect(partitions).toEqual({
      refdata: 4,
      spots: 4,
      vols: 4,
      trades: 4,
      curves: 1,
      limits: 1,
      exposures: 4,
      alerts: 4,
      rejected: 4,
      partials: 4,
    });

    const configs = await a.describeConfigs({
      includeSynonyms: false,
      resources: names.map((n) => ({ type: 2, name: prefix + n })),
    });
    const policy = Object.fromEntries(
      configs.resources.map((r) => [
        r.resourceName.slice(prefix.length),
        r.configEntries.find((e) => e.configName === 'cleanup.policy')?.configValue,
      ]),
    );
    expect(policy).toEqual({
      refdata: 'compact',
      spots: 'compact',
      vols: 'compact',
      curves: 'compact',
      trades: 'delete',
      limits: 'compact',
      exposures: 'compact',
      alerts: 'delete',
      rejected: 'delete',
      partials: 'compact',
    });
    const trades = configs.resources.find((r) => r.resourceName === `${prefix}trades`)!;
    expect(trades.configEntries.find((e) => e.configName === 'retention.ms')?.configValue).toBe('-1');
    await a.disconnect();
  });

  it('keelson topics refuses co-partitioned inputs of unequal size', async () => {
    const prefix = uniquePrefix();
    prefixes.push(prefix);
    const a = admin();
    await a.connect();
    await a.createTopics({ topics: [{ topic: `${prefix}trades`, numPartitions: 2 }], waitForLeaders: false });
    await waitForTopics(a, [`${prefix}trades`]);
    await a.disconnect();
    const io = memoryIo();
    expect(await topicsCommand(['--brokers', brokers.join(','), '--topic-prefix', prefix], io.io)).toBe(2);
    expect(io.out()).toMatch(/PROBLEM: co-partitioned inputs differ in partition count/);
    expect(io.out()).toMatch(/9 created, 1 already there/);
  });

  it('keelson topics names the missing brokers setting', async () => {
    const saved = process.env.KAFKA_BROKERS;
    delete process.env.KAFKA_BROKERS;
    try {
      const io = memoryIo();
      expect(await topicsCommand([], io.io)).toBe(1);
      expect(io.err()).toMatch(/--brokers .*KAFKA_BROKERS/);
    } finally {
      if (saved !== undefined) process.env.KAFKA_BROKERS = saved;
    }
  });
});

const sasl = broker ? await findSaslBroker() : undefined;

describe.skipIf(!sasl)('KafkaBus against a broker that requires SASL', () => {
  const s = sasl!;
  afterAll(async () => {
    if (s.started) await runLocalKafka('stop', ['--sasl', '--port', s.brokers[0]!.split(':')[1]!]);
  });

  const lines: string[] = [];
  const logger: KafkaBusLogger = {
    debug: (o, m) => void lines.push(m + JSON.stringify(o)),
    info: (o, m) => void lines.push(m + JSON.stringify(o)),
    warn: (o, m) => void lines.push(m + JSON.stringify(o)),
    error: (o, m) => void lines.push(m + JSON.stringify(o)),
  };

  beforeAll(() => {
    lines.length = 0;
  });

  async function tryAdmin(opts: ConstructorParameters<typeof KafkaBus>[0]): Promise<string[]> {
    const bus = new KafkaBus({
      brokers: s.brokers,
      logger,
      connectionTimeoutMs: 3000,
      requestTimeoutMs: 5000,
      ...opts,
    });
    const a = bus.admin();
    try {
      await a.connect();
      return await a.listTopics();
    } finally {
      await a.disconnect().catch(() => undefined);
      await bus.close();
    }
  }

  it('lets the right user in with SCRAM-SHA-256, SCRAM-SHA-512 and PLAIN', async () => {
    for (const mechanism of ['scram-sha-256', 'scram-sha-512', 'plain'] as const) {
      const topics = await tryAdmin({ env: {}, sasl: { ...s.sasl, mechanism } });
      expect(Array.isArray(topics)).toBe(true);
    }
  });

  it('takes the credentials from the environment', async () => {
    const topics = await tryAdmin({
      env: {
        KAFKA_SASL_MECHANISM: 'SCRAM-SHA-256',
        KAFKA_SASL_USERNAME: s.sasl.username,
        KAFKA_SASL_PASSWORD: s.sasl.password,
      },
    });
    expect(Array.isArray(topics)).toBe(true);
  });

  it('refuses a wrong password, an unknown user and no credentials, and never logs the password', async () => {
    const wrong = `${s.sasl.password}-wrong`;
    await expect(tryAdmin({ env: {}, sasl: { ...s.sasl, password: wrong } })).rejects.toThrow(
      /SASL|authenticat/i,
    );
    await expect(tryAdmin({ env: {}, sasl: { ...s.sasl, username: 'nobody-here' } })).rejects.toThrow(
      /SASL|authenticat/i,
    );
    await expect(tryAdmin({ env: {} })).rejects.toThrow();
    const log = lines.join('\n');
    expect(log).toContain('kafka bus configured');
    expect(log).not.toContain(s.sasl.password);
    expect(log).not.toContain(wrong);
  }, 60_000);
});
