// Risk control gets every breach and clearance once, with one alertId per episode, across a hard
// kill and restart of the process that judges the limit: role all, and the aggregate stage of a
// scale-out (where the limit watches a desk whose positions sit on two input partitions). And
// operations get a feed that went stale while no instance ran, once, followed by its clearance.
//
// Values are by the contract alone (contract-v1.md): a linear position's pv is q x m x S; the
// limit's utilization is pv / max; with warnAt 0.8 and hysteresis 0.05 u >= 1 is a breach and a
// breach falls to ok below 0.75. Invented demo names throughout.
import { spawn, type ChildProcess } from 'node:child_process';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { KafkaBus, ensureTopics, javaPartition, topicPlan } from '@keelson/bus';
import type { BusRecord } from '@keelson/bus';
import { TOPICS } from '@keelson/shared-types';
import type { AlertMsg, StaleFeedMsg } from '@keelson/shared-types';
import { findBroker, uniquePrefix } from './support/kafka.ts';

const broker = await findBroker();
const brokers = broker?.brokers ?? [];
const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');
const PARTITIONS = 4;
const LIMIT = 'L-KESTREL-PV';

function keelson(args: string[]) {
  const child = spawn(process.execPath, [bin, ...args], {
    stdio: ['ignore', 'pipe', 'pipe'],
    env: { ...process.env, KAFKA_BROKERS: brokers.join(',') },
  });
  let log = '';
  child.stdout!.on('data', (d: Buffer) => (log += d.toString()));
  child.stderr!.on('data', (d: Buffer) => (log += d.toString()));
  const exited = new Promise<number | null>((r) => child.on('exit', (code) => r(code)));
  return { child, log: () => log, exited };
}

async function until(what: string, ok: () => boolean, timeoutMs: number, log?: () => string): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  while (!ok()) {
    if (Date.now() > deadline)
      throw new Error(`timed out waiting for ${what}${log ? `\n--- log tail:\n${log().slice(-4000)}` : ''}`);
    await new Promise((r) => setTimeout(r, 200));
  }
}

/** Two underlyings whose keys land on different input partitions (the Java partitioner's rule). */
function twoPartitions(): [string, string] {
  const names = ['KESTA', 'MARLO', 'ORWEN', 'PIKAR', 'QUILL', 'RUNDO'];
  const a = names[0]!;
  const b = names.find((n) => javaPartition(n, PARTITIONS) !== javaPartition(a, PARTITIONS))!;
  return [a, b];
}

let seq = 0;
const ts = () => new Date(Date.parse('2026-03-02T14:00:00Z') + 1000 * ++seq).toISOString();

function trade(tradeId: string, version: number, underlying: string, quantity: number) {
  return {
    type: 'trade',
    tradeId,
    version,
    action: version === 1 ? 'new' : 'amend',
    ts: ts(),
    desk: 'KESTREL',
    book: 'KESTREL-CASH',
    underlying,
    instrument: { kind: 'linear' },
    quantity,
    price: 100,
  };
}
const cancel = (tradeId: string, version: number, underlying: string) => ({
  type: 'trade',
  tradeId,
  version,
  action: 'cancel',
  underlying,
  ts: ts(),
});

async function setup() {
  const prefix = uniquePrefix('alerts');
  const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
  const admin = producer.admin();
  await admin.connect();
  await ensureTopics(admin, prefix, topicPlan({ partitions: PARTITIONS }));
  await admin.disconnect();
  const send = async (topic: string, key: string, msg: object) =>
    producer.publish(topic, [{ key, value: JSON.stringify(msg) }]);
  const [u1, u2] = twoPartitions();
  for (const u of [u1, u2]) {
    await send(TOPICS.refdata, u, {
      type: 'underlying',
      underlying: u,
      kind: 'equity',
      currency: 'USD',
      ts: ts(),
    });
    await send(TOPICS.spots, u, { type: 'spot', underlying: u, price: 100, ts: ts() });
  }
  await send(TOPICS.limits, LIMIT, {
    type: 'limit',
    limitId: LIMIT,
    scope: { desk: 'KESTREL' },
    metric: 'pv',
    max: 1000,
    warnAt: 0.8,
    hysteresis: 0.05,
    ts: ts(),
  });
  const alerts: AlertMsg[] = [];
  const reader = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}reader` });
  await reader.subscribe([TOPICS.alerts], async (batch: BusRecord[]) => {
    for (const r of batch) {
      const a = JSON.parse(r.value) as AlertMsg;
      if (a.type === 'alert') alerts.push(a);
    }
  });
  const trades = (m: { underlying: string }) => send(TOPICS.trades, m.underlying, m);
  return { prefix, u1, u2, trades, alerts, buses: [producer, reader] };
}

const brief = (a: AlertMsg) => `${a.state} ${a.alertId} ${a.severity}`;

describe.skipIf(!broker)('limit alerts on Kafka across restarts', () => {
  const buses: KafkaBus[] = [];
  const children: ChildProcess[] = [];
  afterAll(async () => {
    for (const c of children) if (c.exitCode === null) c.kill('SIGKILL');
    await Promise.allSettled(buses.map((b) => b.close()));
  });

  it('role all, killed hard with an episode open: no second raised, the clearance carries its alertId', async () => {
    const s = await setup();
    buses.push(...s.buses);
    const args = [
      'run',
      '--topic-prefix',
      s.prefix,
      '--group',
      `${s.prefix}g`,
      '--clock',
      'event',
      '--port',
      '0',
    ];
    let p = keelson(args);
    children.push(p.child);
    await until('live', () => /rebuilt from the topics; live/.test(p.log()), 60_000, p.log);

    await s.trades(trade('K-1', 1, s.u1, 6)); // 600: u 0.6
    await s.trades(trade('K-2', 1, s.u2, 6)); // 1200: u 1.2, raised #1
    await until('raised #1', () => s.alerts.length === 1, 30_000, p.log);
    await s.trades(trade('K-2', 2, s.u2, 1)); // 700: u 0.7 < 0.75, cleared #1
    await s.trades(trade('K-2', 3, s.u2, 7)); // 1300: raised #2
    await until('three alerts', () => s.alerts.length === 3, 30_000, p.log);

    p.child.kill('SIGKILL');
    await p.exited;
    p = keelson(args);
    children.push(p.child);
    await until('live again', () => /rebuilt from the topics; live/.test(p.log()), 60_000, p.log);
    await s.trades(trade('K-2', 4, s.u2, 9)); // 1500: still a breach, nothing to say
    await s.trades(cancel('K-2', 5, s.u2)); // 600: cleared #2
    await until('the clearance', () => s.alerts.length >= 4, 30_000, p.log);
    await new Promise((r) => setTimeout(r, 1500)); // anything stray would be here by now
    expect(s.alerts.map(brief)).toEqual([
      `raised ${LIMIT}#1 breach`,
      `cleared ${LIMIT}#1 ok`,
      `raised ${LIMIT}#2 breach`,
      `cleared ${LIMIT}#2 ok`,
    ]);
    p.child.kill('SIGTERM');
    expect(await p.exited).toBe(0);
  }, 180_000);

  it('scale-out: a desk limit over two partitions raises and clears once, and continues across an aggregator kill', async () => {
    const s = await setup();
    buses.push(...s.buses);
    const common = ['--topic-prefix', s.prefix, '--clock', 'event', '--port', '0'];
    const aggArgs = ['run', '--role', 'aggregate', '--group', `${s.prefix}agg`, ...common];
    let agg = keelson(aggArgs);
    const e1 = keelson([
      'run',
      '--role',
      'engine',
      '--group',
      `${s.prefix}eng`,
      '--instance-id',
      'e1',
      ...common,
    ]);
    const e2 = keelson([
      'run',
      '--role',
      'engine',
      '--group',
      `${s.prefix}eng`,
      '--instance-id',
      'e2',
      ...common,
    ]);
    children.push(agg.child, e1.child, e2.child);
    const logs = () =>
      `[agg]\n${agg.log().slice(-2000)}\n[e1]\n${e1.log().slice(-1500)}\n[e2]\n${e2.log().slice(-1500)}`;
    await until(
      'all live',
      () => [agg, e1, e2].every((x) => /rebuilt from the (topics|partials); live/.test(x.log())),
      60_000,
      logs,
    );
    await s.trades(trade('K-1', 1, s.u1, 6)); // partition A: 600
    await s.trades(trade('K-2', 1, s.u2, 6)); // partition B: 600; the desk sums 1200: raised #1
    await until('raised', () => s.alerts.length >= 1, 30_000, logs);
    await s.trades(cancel('K-2', 2, s.u2)); // 600: cleared #1
    await until('cleared', () => s.alerts.length >= 2, 30_000, logs);
    await new Promise((r) => setTimeout(r, 1500));
    expect(s.alerts.map(brief)).toEqual([`raised ${LIMIT}#1 breach`, `cleared ${LIMIT}#1 ok`]);
    expect(s.alerts[0]).toMatchObject({
      nodeKey: 'desk=KESTREL',
      value: 1200,
      bound: 1000,
      utilization: 1.2,
    });

    await s.trades(trade('K-3', 1, s.u2, 7)); // 1300: raised #2
    await until('raised #2', () => s.alerts.length >= 3, 30_000, logs);
    agg.child.kill('SIGKILL');
    await agg.exited;
    agg = keelson(aggArgs);
    children.push(agg.child);
    await until(
      'aggregator live again',
      () => /rebuilt from the partials; live/.test(agg.log()),
      60_000,
      logs,
    );
    await s.trades(cancel('K-3', 2, s.u2)); // 600: cleared #2
    await until('cleared #2', () => s.alerts.length >= 4, 30_000, logs);
    await new Promise((r) => setTimeout(r, 1500));
    expect(s.alerts.map(brief)).toEqual([
      `raised ${LIMIT}#1 breach`,
      `cleared ${LIMIT}#1 ok`,
      `raised ${LIMIT}#2 breach`,
      `cleared ${LIMIT}#2 ok`,
    ]);
    for (const x of [agg, e1, e2]) x.child.kill('SIGTERM');
    for (const x of [agg, e1, e2]) expect(await x.exited).toBe(0);
  }, 240_000);

  it('a feed that goes stale while the engine is down is raised once on restart, then cleared by its next tick', async () => {
    // Wall clock (the default): time passes while no instance runs, and the rebuild, which
    // publishes nothing of what it replays, finds the feed stale. Threshold 20 s (the contract's
    // rule: stale once the last spot is older than the threshold at valuation time).
    const prefix = uniquePrefix('feeds');
    const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(producer);
    const admin = producer.admin();
    await admin.connect();
    await ensureTopics(admin, prefix, topicPlan({ partitions: PARTITIONS }));
    await admin.disconnect();
    const U = 'FENWA';
    const send = (topic: string, msg: object) =>
      producer.publish(topic, [{ key: U, value: JSON.stringify(msg) }]);
    const firstTick = Date.now();
    await send(TOPICS.refdata, {
      type: 'underlying',
      underlying: U,
      kind: 'equity',
      currency: 'USD',
      ts: new Date(firstTick).toISOString(),
    });
    await send(TOPICS.spots, {
      type: 'spot',
      underlying: U,
      price: 50,
      ts: new Date(firstTick).toISOString(),
    });
    const feeds: StaleFeedMsg[] = [];
    const reader = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}reader` });
    buses.push(reader);
    await reader.subscribe([TOPICS.alerts], async (batch: BusRecord[]) => {
      for (const r of batch) {
        const f = JSON.parse(r.value) as StaleFeedMsg;
        if (f.type === 'stale-feed') feeds.push(f);
      }
    });
    const args = [
      'run',
      '--topic-prefix',
      prefix,
      '--group',
      `${prefix}g`,
      '--stale-after',
      '20',
      '--port',
      '0',
    ];
    let p = keelson(args);
    children.push(p.child);
    await until('live', () => /rebuilt from the topics; live/.test(p.log()), 60_000, p.log);
    expect(Date.now() - firstTick).toBeLessThan(20_000); // still fresh when it went down
    p.child.kill('SIGKILL');
    await p.exited;
    await until('the spot to age past the threshold', () => Date.now() - firstTick > 21_000, 30_000);

    p = keelson(args);
    children.push(p.child);
    await until('live again', () => /rebuilt from the topics; live/.test(p.log()), 60_000, p.log);
    await until('the raised', () => feeds.length >= 1, 30_000, p.log);
    p.child.kill('SIGKILL'); // down again with the feed stale, and this time it was announced
    await p.exited;
    p = keelson(args);
    children.push(p.child);
    await until('live a third time', () => /rebuilt from the topics; live/.test(p.log()), 60_000, p.log);
    await send(TOPICS.spots, { type: 'spot', underlying: U, price: 51, ts: new Date().toISOString() });
    await until('the clearance', () => feeds.length >= 2, 30_000, p.log);
    await new Promise((r) => setTimeout(r, 1500)); // anything stray would be here by now
    expect(feeds.map((f) => `${f.underlying} ${f.state} ${f.lastTick}`)).toEqual([
      `${U} raised ${new Date(firstTick).toISOString()}`,
      `${U} cleared ${feeds[1]?.lastTick}`,
    ]);
    expect(Date.parse(feeds[1]!.lastTick)).toBeGreaterThan(firstTick);
    p.child.kill('SIGTERM');
    expect(await p.exited).toBe(0);
  }, 180_000);
});
