// Kafka mode, measured on a real broker, in one run:
//  1. a bare kafkajs consumer draining the spots topic (the transport's ceiling on this machine);
//  2. `keelson run --role all` draining the same ticks (engine throughput: committed offsets, i.e.
//     ingested, revalued, published and acknowledged), and the ratio of the two;
//  3. tick-to-exposure latency at a steady tick rate: from a tick's publish to the arrival, at a
//     reader of the exposures topic, of its underlying's exposure valued after it.
// Book: the engine benchmark's 100 000 positions over 500 underlyings (tests/bench/book.ts), the
// book the targets name. `npm run bench -- kafka`; BENCH_TICKS and BENCH_RATE tune it.
import { spawn } from 'node:child_process';
import { join } from 'node:path';
import kafkajs from 'kafkajs';
import { KafkaBus, ensureTopics, topicPlan } from '@keelson/bus';
import { inputKey, inputTopic } from '@keelson/shared-types';
import type { ExposureMsg, InputMsg, SpotMsg } from '@keelson/shared-types';
import { findBroker, uniquePrefix } from '../support/kafka.ts';
import { POSITIONS, UNDERLYINGS, bookMessages } from './book.ts';

// Enough ticks that the drain is sustained: joining, the last flush and its commit are a small part.
const TICKS = Number(process.env.BENCH_TICKS ?? 300_000);
const RATE = Number(process.env.BENCH_RATE ?? 10_000);
const PUBLISH_MS = Number(process.env.BENCH_PUBLISH_MS ?? 100);
const LATENCY_SECONDS = 10;

const broker = await findBroker();
if (!broker) {
  console.log('kafka bench: no broker (see tests/support/kafka.ts); skipped');
  process.exit(0);
}
const brokers = broker.brokers;
const prefix = uniquePrefix('bench');
const quiet = { logLevel: kafkajs.logLevel.NOTHING };
const kafka = new kafkajs.Kafka({ clientId: 'keelson-bench', brokers, ...quiet });
const admin = kafka.admin();
await admin.connect();
await ensureTopics(admin, prefix, topicPlan({ partitions: 6 }));
const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, clientId: 'keelson-bench-producer' });

async function publishAll(msgs: InputMsg[]): Promise<void> {
  const byTopic = new Map<string, { key: string; value: string }[]>();
  for (const m of msgs) {
    const t = inputTopic(m);
    if (!byTopic.has(t)) byTopic.set(t, []);
    byTopic.get(t)!.push({ key: inputKey(m), value: JSON.stringify(m) });
  }
  // Reference data and market data before the trades and limits that need them.
  for (const t of ['refdata', 'curves', 'vols', 'spots', 'trades', 'limits']) {
    const rs = byTopic.get(t) ?? [];
    for (let i = 0; i < rs.length; i += 2000) await producer.publish(t, rs.slice(i, i + 2000));
  }
}

const startMs = Date.now();
const boot = [...bookMessages(startMs)];
const spots = boot.filter((m): m is SpotMsg => m.type === 'spot');
const prices = new Map(spots.map((s) => [s.underlying, s.price]));
const names = [...prices.keys()];
let seq = 0;
function tick(tsMs: number): SpotMsg {
  const u = names[seq++ % names.length]!;
  const p = prices.get(u)! * (1 + ((seq * 7919) % 11) / 1e4 - 5e-4);
  prices.set(u, p);
  return { type: 'spot', underlying: u, price: p, ts: new Date(tsMs).toISOString() };
}

async function committedLag(groupId: string, topic: string): Promise<bigint> {
  const high = await admin.fetchTopicOffsets(prefix + topic);
  const done = await admin.fetchOffsets({ groupId, topics: [prefix + topic] });
  let lag = 0n;
  for (const h of high) {
    const c = done[0]!.partitions.find((p) => p.partition === h.partition)?.offset ?? '-1';
    lag += BigInt(h.high) - (BigInt(c) < 0n ? 0n : BigInt(c));
  }
  return lag;
}

async function waitFor(what: string, ok: () => Promise<boolean> | boolean, timeoutMs: number): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  while (!(await ok())) {
    if (Date.now() > deadline) throw new Error(`kafka bench: timed out waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

function startEngine(group: string): { log: () => string; stop: () => Promise<void> } {
  const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');
  const child = spawn(
    process.execPath,
    [
      // BENCH_CPU_PROF=DIR writes a V8 CPU profile of each engine run there (see where time goes).
      ...(process.env.BENCH_CPU_PROF ? ['--cpu-prof', '--cpu-prof-dir', process.env.BENCH_CPU_PROF] : []),
      bin,
      'run',
      '--brokers',
      brokers.join(','),
      '--topic-prefix',
      prefix,
      '--group',
      group,
      '--port',
      '0',
      '--decay-interval',
      '0',
      '--publish-interval',
      String(PUBLISH_MS),
      '--log-level',
      'info',
    ],
    { stdio: ['ignore', 'pipe', 'pipe'] },
  );
  let log = '';
  child.stdout.on('data', (d: Buffer) => (log += d.toString()));
  child.stderr.on('data', (d: Buffer) => (log += d.toString()));
  return {
    log: () => log,
    stop: () =>
      new Promise((resolve) => {
        child.on('exit', () => resolve());
        child.kill('SIGTERM');
      }),
  };
}

console.log(
  `kafka bench: broker ${brokers.join(',')} (${broker.source}), ${POSITIONS} positions over ${UNDERLYINGS} underlyings, ${TICKS} ticks`,
);
await publishAll(boot);

// The engine builds the book once, so that the timed drain below is ticks only.
const group = `${prefix}engine`;
let engine = startEngine(group);
await waitFor(
  'the engine to take the bootstrap',
  async () => (await committedLag(group, 'trades')) === 0n && (await committedLag(group, 'spots')) === 0n,
  300_000,
);
await engine.stop();

const backlog: InputMsg[] = [];
for (let i = 0; i < TICKS; i++) backlog.push(tick(Date.now()));
const t0 = performance.now();
await publishAll(backlog);
const publishS = (performance.now() - t0) / 1000;
const totalSpots = spots.length + TICKS;

// 1. Bare kafkajs: fetch and count, nothing else (the target's reference); and, for context, the
//    same consumer decoding each value as JSON (the least any consumer of these ticks must do),
//    and counting on Keelson's replacements of kafkajs's hot paths (what the engine runs on).
//    Each in a process of its own (kafka-drain.ts), so that the bare one is kafkajs alone.
function bareDrain(mode: 'bare' | 'json' | 'keelson-paths'): Promise<{ rate: number; parsed: number }> {
  const script = join(process.cwd(), 'tests', 'bench', 'kafka-drain.ts');
  const child = spawn(
    process.execPath,
    ['--import', 'tsx', script, brokers.join(','), prefix + 'spots', String(totalSpots), mode],
    { stdio: ['ignore', 'pipe', 'inherit'] },
  );
  let out = '';
  child.stdout.on('data', (d: Buffer) => (out += d.toString()));
  return new Promise((resolve, reject) => {
    child.on('exit', (code) => {
      if (code !== 0) reject(new Error(`kafka bench: the ${mode} drain exited with ${code}`));
      else resolve(JSON.parse(out.trim().split('\n').at(-1)!) as { rate: number; parsed: number });
    });
  });
}
const bareRate = (await bareDrain('bare')).rate;
const jsonDrain = await bareDrain('json');
const parseRate = jsonDrain.rate;
const sink = jsonDrain.parsed;
const decoderRate = (await bareDrain('keelson-paths')).rate;

// 2. The engine: restart, rebuild (the book), then drain the tick backlog live.
engine = startEngine(group);
await waitFor(
  'the engine to rebuild the book and go live',
  () => /rebuilt from the topics; live/.test(engine.log()),
  300_000,
);
const liveAt = performance.now();
await waitFor(
  'the engine to drain the ticks',
  async () => (await committedLag(group, 'spots')) === 0n,
  600_000,
);
const engineS = (performance.now() - liveAt) / 1000;
const engineRate = TICKS / engineS;

// 3. Latency at a steady rate.
const reader = new KafkaBus({
  brokers,
  env: {},
  topicPrefix: prefix,
  groupId: `${prefix}reader`,
  fromBeginning: false,
});
const pending = new Map<string, number[]>(); // underlying -> publish times of ticks not yet seen valued
const lat: number[] = [];
// The same latency in three parts: tick to valuation (the node's asOf, the wall clock when the
// engine valued it: waiting for the flush, then applying), valuation to produce (the record's
// timestamp, stamped when its produce request was built: the rest of the flush's revaluation,
// serialising), and produce to arrival at the reader (the request, the broker, the reader's fetch).
const toValued: number[] = [];
const valuedToProduced: number[] = [];
const producedToRead: number[] = [];
let measuring = false;
await reader.subscribe(['exposures'], async (batch) => {
  const now = Date.now();
  for (const r of batch) {
    if (!measuring || !r.key?.startsWith('underlying=') || r.key.includes('/')) continue;
    const e = JSON.parse(r.value) as ExposureMsg;
    const u = e.node.underlying!;
    const asOf = Date.parse(e.asOf);
    const q = pending.get(u);
    if (!q) continue;
    // Every tick published before the valuation time is reflected in this exposure.
    while (q.length && q[0]! <= asOf) {
      const at = q.shift()!;
      lat.push(now - at);
      toValued.push(asOf - at);
      valuedToProduced.push(r.timestamp! - asOf);
      producedToRead.push(now - r.timestamp!);
    }
  }
});
await new Promise((r) => setTimeout(r, 3000)); // the reader joins its group
measuring = true;
const steps = LATENCY_SECONDS * 20;
const perStep = Math.max(1, Math.round(RATE / 20));
for (let s = 0; s < steps; s++) {
  const stepStart = Date.now();
  const batch: InputMsg[] = [];
  for (let i = 0; i < perStep; i++) {
    const m = tick(Date.now());
    batch.push(m);
    const at = Date.parse(m.ts);
    if (!pending.has(m.underlying)) pending.set(m.underlying, []);
    pending.get(m.underlying)!.push(at);
  }
  await producer.publish(
    'spots',
    batch.map((m) => ({ key: inputKey(m), value: JSON.stringify(m) })),
  );
  await new Promise((r) => setTimeout(r, Math.max(0, 50 - (Date.now() - stepStart))));
}
await new Promise((r) => setTimeout(r, 2000));
measuring = false;
for (const xs of [lat, toValued, valuedToProduced, producedToRead]) xs.sort((a, b) => a - b);
const pctOf = (xs: number[], p: number) =>
  xs[Math.min(xs.length - 1, Math.floor((p / 100) * xs.length))] ?? Number.NaN;
const pct = (p: number) => pctOf(lat, p);

console.log(
  `publish of ${TICKS} ticks (kafkajs producer, idempotent, acks=all): ${(TICKS / publishS).toFixed(0)} msg/s`,
);
console.log(`bare kafkajs consumer drain:   ${bareRate.toFixed(0)} ticks/s`);
console.log(
  `  same, JSON.parse of each value: ${parseRate.toFixed(0)} ticks/s (${(parseRate / bareRate).toFixed(3)} of bare; ${sink} parsed)`,
);
console.log(
  `  same, on Keelson's kafkajs fast paths: ${decoderRate.toFixed(0)} ticks/s (${(decoderRate / bareRate).toFixed(3)} of bare)`,
);
console.log(
  `keelson run (role all) drain:  ${engineRate.toFixed(0)} ticks/s (ingest, revalue, publish, ack, commit)`,
);
console.log(
  `ratio engine / bare consumer:  ${(engineRate / bareRate).toFixed(3)} (engine / the JSON-parsing consumer: ${(engineRate / parseRate).toFixed(3)})`,
);
console.log(
  `tick-to-exposure at ${RATE} ticks/s for ${LATENCY_SECONDS}s: p50 ${pct(50)} ms, p99 ${pct(99)} ms, max ${lat.at(-1)} ms over ${lat.length} ticks (publish interval ${PUBLISH_MS} ms)`,
);
console.log(
  `  of which tick to valuation p50 ${pctOf(toValued, 50)} / p99 ${pctOf(toValued, 99)} ms, valuation to produce ${pctOf(valuedToProduced, 50)} / ${pctOf(valuedToProduced, 99)} ms, produce to reader ${pctOf(producedToRead, 50)} / ${pctOf(producedToRead, 99)} ms`,
);

await engine.stop();
await reader.close();
await producer.close();
const topics = (await admin.listTopics()).filter((t) => t.startsWith(prefix));
await admin.deleteTopics({ topics }).catch(() => undefined);
await admin.disconnect();
process.exit(0);
