// Consumer lag on a real broker: a consumer held up sees the lag equal to what was published
// behind it, and 0 once it has drained; `keelson run` shows the series on /metrics and judges
// readiness by it.
import { spawn } from 'node:child_process';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { KafkaBus, ensureTopics, startLagReporter, topicPlan } from '@keelson/bus';
import { KeelsonMetrics } from '@keelson/http';
import { TOPICS } from '@keelson/shared-types';
import { findBroker, uniquePrefix } from './support/kafka.ts';

const broker = await findBroker();
const brokers = broker?.brokers ?? [];
const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');

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

/** The lag series of one topic from Prometheus text: partition -> value. */
function lagSeries(text: string, topic: string): Map<string, number> {
  const out = new Map<string, number>();
  const re = /^keelson_consumer_lag_messages\{([^}]*)\} (\S+)$/gm;
  for (const m of text.matchAll(re)) {
    const labels = Object.fromEntries([...m[1]!.matchAll(/(\w+)="([^"]*)"/g)].map((x) => [x[1], x[2]]));
    if (labels.topic === topic) out.set(labels.partition!, Number(m[2]));
  }
  return out;
}
const total = (m: Map<string, number>) => [...m.values()].reduce((a, b) => a + b, 0);

async function freshTopics(bus: KafkaBus, prefix: string) {
  const admin = bus.admin();
  await admin.connect();
  await ensureTopics(admin, prefix, topicPlan({ partitions: 3 }));
  await admin.disconnect();
}

describe.skipIf(!broker)('consumer lag on Kafka', () => {
  const buses: KafkaBus[] = [];
  afterAll(async () => {
    await Promise.allSettled(buses.map((b) => b.close()));
  });

  it('equals what was published behind a held-up consumer, and falls to 0 once it drains', async () => {
    const prefix = uniquePrefix('lag');
    const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(producer);
    await freshTopics(producer, prefix);
    const consumer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}g` });
    buses.push(consumer);
    let open!: () => void;
    const gate = new Promise<void>((r) => (open = r));
    let handled = 0;
    await consumer.subscribe([TOPICS.trades], async (batch) => {
      await gate; // held up: nothing is handled, so nothing is committed
      handled += batch.length;
    });
    const metrics = new KeelsonMetrics();
    const reporter = startLagReporter(consumer, metrics, 200);
    await until('an assignment', () => consumer.assignments().some((a) => a.assignment.length > 0), 30_000);

    const N = 37;
    const records = Array.from({ length: N }, (_, i) => ({ key: `K${i % 7}`, value: `{"n":${i}}` }));
    await producer.publish(TOPICS.trades, records);
    await until(
      'the lag of all N',
      async () => total(lagSeries(await metrics.text(), TOPICS.trades)) === N,
      20_000,
    );
    const held = lagSeries(await metrics.text(), TOPICS.trades);
    expect([...held.keys()].sort()).toEqual(['0', '1', '2']);
    expect(reporter.maxLag()).toBe(Math.max(...held.values()));

    open();
    await until('drained', () => handled === N, 20_000);
    await until('lag 0', async () => total(lagSeries(await metrics.text(), TOPICS.trades)) === 0, 20_000);
    expect(lagSeries(await metrics.text(), TOPICS.trades).size).toBe(3);

    // Revoked partitions lose their series: another member of the group takes some of them.
    const other = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}g` });
    buses.push(other);
    await other.subscribe([TOPICS.trades], async () => undefined);
    await until(
      'the partitions shared',
      async () => {
        const mine = consumer.assignments()[0]?.assignment[0]?.partitions.length ?? 0;
        return mine > 0 && mine < 3 && lagSeries(await metrics.text(), TOPICS.trades).size === mine;
      },
      30_000,
    );
    reporter.stop();
  }, 90_000);

  it('keelson run publishes the lag of its partitions and counts it among the /readyz checks', async () => {
    const prefix = uniquePrefix('lagrun');
    const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(producer);
    await freshTopics(producer, prefix);
    const child = spawn(
      process.execPath,
      [
        bin,
        'run',
        '--brokers',
        brokers.join(','),
        '--topic-prefix',
        prefix,
        '--group',
        `${prefix}g`,
        '--clock',
        'event',
        '--port',
        '0',
        '--lag-interval',
        '0.5',
        '--max-ready-lag',
        '5',
      ],
      { stdio: ['ignore', 'pipe', 'pipe'] },
    );
    let log = '';
    child.stdout.on('data', (d: Buffer) => (log += d.toString()));
    child.stderr.on('data', (d: Buffer) => (log += d.toString()));
    const exited = new Promise<number | null>((r) => child.on('exit', (c) => r(c)));
    try {
      await until(
        'the url',
        () => /"url":"(http:[^"]+)"/.test(log),
        60_000,
        () => log,
      );
      const url = /"url":"(http:[^"]+)"/.exec(log)![1]!;
      await until(
        'ready',
        async () => (await fetch(`${url}/readyz`)).status === 200,
        60_000,
        () => log,
      );
      const body = (await (await fetch(`${url}/readyz`)).json()) as {
        checks: Record<string, { ok: boolean; detail: string }>;
      };
      expect(body.checks.consumerLag).toEqual({
        ok: true,
        detail: 'largest partition lag 0 messages (ready at most 5)',
      });
      const text = await (await fetch(`${url}/metrics`)).text();
      const trades = lagSeries(text, TOPICS.trades);
      expect([...trades.entries()].sort()).toEqual([
        ['0', 0],
        ['1', 0],
        ['2', 0],
      ]);
      expect(lagSeries(text, TOPICS.limits).size).toBe(1);
    } finally {
      child.kill('SIGTERM');
    }
    expect(await exited).toBe(0);
  }, 120_000);
});
