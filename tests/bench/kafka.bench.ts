// Kafka mode, measured on a real broker, in one run:
//  1. a bare kafkajs consumer draining the spots topic (the transport's ceiling on this machine);
//  2. `keelson run --role all` draining the same ticks (engine throughput: committed offsets, i.e.
//     ingested, revalued, published and acknowledged), in rounds alternating with the bare
//     consumer, and the median of the rounds' ratios;
//  3. tick-to-exposure latency at a steady tick rate, at the default publish interval and at a
//     short one: from a tick's publish to the arrival, at a reader of the exposures topic, of its
//     underlying's exposure valued after it.
// Book: the engine benchmark's 100 000 positions over 500 underlyings (tests/bench/book.ts), the
// book the targets name. `npm run bench -- kafka`. Tuning: BENCH_TICKS (the drain's backlog),
// BENCH_DRAIN_ROUNDS, BENCH_RATE, BENCH_STEP_MS, BENCH_LATENCY_INTERVALS (ms, comma-separated). Looking inside:
// BENCH_CPU_PROF=DIR (a V8 CPU profile of each engine run), BENCH_ENGINE_NODE_ARGS (e.g.
// --trace-gc), BENCH_ENGINE_LOG=FILE (the last engine's log), BENCH_LAT_DUMP=FILE (one line per
// measured tick: publish time, total, and the three parts, partition).
import { spawn } from 'node:child_process';
import { join } from 'node:path';
import kafkajs from 'kafkajs';
import { KafkaBus, ensureTopics, topicPlan } from '@keelson/bus';
import { inputKey, inputTopic } from '@keelson/shared-types';
import type { ExposureMsg, InputMsg, SpotMsg } from '@keelson/shared-types';
import { findBroker, uniquePrefix } from '../support/kafka.ts';
import { POSITIONS, UNDERLYINGS, bookMessages } from './book.ts';

// Enough ticks that the drain is sustained (joining, the last flush and its commit are a small
// part), and few enough that no partition of the compacted spots topic rolls a segment (16 MB on
// the local broker) and has ticks compacted away while it is drained.
const TICKS = Number(process.env.BENCH_TICKS ?? 500_000);
const RATE = Number(process.env.BENCH_RATE ?? 10_000);
// The drain runs at the default publish interval; the latency is measured at each of these.
const PUBLISH_MS = 100;
const LATENCY_INTERVALS = (process.env.BENCH_LATENCY_INTERVALS ?? '100,20').split(',').map(Number);
const DRAIN_ROUNDS = Number(process.env.BENCH_DRAIN_ROUNDS ?? 5);
const STEP_MS = Number(process.env.BENCH_STEP_MS ?? 50);
const LATENCY_SECONDS = 10;
const WARMUP_SECONDS = 2;

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
// Let go of once published (see the latency section).
let boot: InputMsg[] = [...bookMessages(startMs)];
const spots = boot.filter((m): m is SpotMsg => m.type === 'spot');
const bootSpots = spots.length;
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

function startEngine(
  group: string,
  publishIntervalMs: number,
): { log: () => string; stop: () => Promise<void> } {
  const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');
  const child = spawn(
    process.execPath,
    [
      // BENCH_CPU_PROF=DIR writes a V8 CPU profile of each engine run there (see where time goes).
      ...(process.env.BENCH_CPU_PROF ? ['--cpu-prof', '--cpu-prof-dir', process.env.BENCH_CPU_PROF] : []),
      ...(process.env.BENCH_ENGINE_NODE_ARGS ? process.env.BENCH_ENGINE_NODE_ARGS.split(' ') : []),
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
      String(publishIntervalMs),
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
boot = [];

// The engine builds the book once, so that the timed drain below is ticks only.
const group = `${prefix}engine`;
let engine = startEngine(group, PUBLISH_MS);
await waitFor(
  'the engine to take the bootstrap',
  async () => (await committedLag(group, 'trades')) === 0n && (await committedLag(group, 'spots')) === 0n,
  300_000,
);
await engine.stop();

let backlog: InputMsg[] = [];
for (let i = 0; i < TICKS; i++) backlog.push(tick(Date.now()));
const t0 = performance.now();
await publishAll(backlog);
const publishS = (performance.now() - t0) / 1000;
backlog = [];
const totalSpots = bootSpots + TICKS;

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
  const timer = setTimeout(() => child.kill('SIGKILL'), 300_000);
  return new Promise((resolve, reject) => {
    child.on('exit', (code) => {
      clearTimeout(timer);
      if (code !== 0) reject(new Error(`kafka bench: the ${mode} drain exited with ${code}`));
      else resolve(JSON.parse(out.trim().split('\n').at(-1)!) as { rate: number; parsed: number });
    });
  });
}
const jsonDrain = await bareDrain('json');
const parseRate = jsonDrain.rate;
const sink = jsonDrain.parsed;
const decoderRate = (await bareDrain('keelson-paths')).rate;

// 2. The engine: restart, rebuild (the book), then drain the tick backlog live; in rounds that
//    alternate with the bare consumer, because the machine's load moves both from one second to the
//    next. Each round starts the engine's group where the bootstrap left it, before the backlog.
/** The engine restarted with this publish interval, once it has rebuilt from the topics. */
async function startLive(publishIntervalMs: number): Promise<void> {
  engine = startEngine(group, publishIntervalMs);
  await waitFor(
    'the engine to rebuild the book and go live',
    () => /rebuilt from the topics; live/.test(engine.log()),
    300_000,
  );
}
const [bootOffsets] = await admin.fetchOffsets({ groupId: group, topics: [prefix + 'spots'] });
async function engineDrain(): Promise<number> {
  await admin.setOffsets({ groupId: group, topic: prefix + 'spots', partitions: bootOffsets!.partitions });
  await startLive(PUBLISH_MS);
  const liveAt = performance.now();
  await waitFor(
    'the engine to drain the ticks',
    async () => (await committedLag(group, 'spots')) === 0n,
    600_000,
  );
  const rate = TICKS / ((performance.now() - liveAt) / 1000);
  await engine.stop();
  return rate;
}
const rounds: { bare: number; engine: number }[] = [];
for (let k = 0; k < DRAIN_ROUNDS; k++) {
  const bare = (await bareDrain('bare')).rate;
  rounds.push({ bare, engine: await engineDrain() });
}
const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)]!;
const ratios = rounds.map((r) => r.engine / r.bare).sort((a, b) => a - b);
const medianRatio = median(ratios);
const bareRate = median(rounds.map((r) => r.bare));

// 3. Latency at a steady rate, once per publish interval in LATENCY_INTERVALS: the engine
//    restarted (rebuilt) with that interval each time, the same reader throughout.
const reader = new KafkaBus({
  brokers,
  env: {},
  topicPrefix: prefix,
  groupId: `${prefix}reader`,
  fromBeginning: false,
});
let pending = new Map<string, number[]>(); // underlying -> publish times of ticks not yet seen valued
// Each latency in three parts: tick to valuation (the node's asOf, the wall clock when the engine
// valued it: the transport to the engine, waiting for the flush, then applying), valuation to
// produce (the record's timestamp, stamped when its produce request was built: the rest of the
// flush's revaluation, serialising), and produce to arrival at the reader (the request, the
// broker, the reader's fetch).
interface Latencies {
  total: number[];
  toValued: number[];
  valuedToProduced: number[];
  producedToRead: number[];
}
let sample: Latencies | undefined;
// Ticks stamped from this instant on are measured; the reader does the same work before it.
let measureFrom = Number.POSITIVE_INFINITY;
const dump: string[] | undefined = process.env.BENCH_LAT_DUMP ? [] : undefined;
await reader.subscribe(
  ['exposures'],
  async (batch) => {
    const now = Date.now();
    for (const r of batch) {
      if (!r.key?.startsWith('underlying=') || r.key.includes('/')) continue;
      const e = JSON.parse(r.value) as ExposureMsg;
      const u = e.node.underlying!;
      const asOf = Date.parse(e.asOf);
      const q = pending.get(u);
      if (!q) continue;
      // Every tick published before the valuation time is reflected in this exposure.
      while (q.length && q[0]! <= asOf) {
        const at = q.shift()!;
        if (at < measureFrom || !sample) continue;
        sample.total.push(now - at);
        sample.toValued.push(asOf - at);
        sample.valuedToProduced.push(r.timestamp! - asOf);
        sample.producedToRead.push(now - r.timestamp!);
        dump?.push(
          `${at} ${now - at} ${asOf - at} ${r.timestamp! - asOf} ${now - r.timestamp!} ${r.partition}`,
        );
      }
    }
    // A reader of exposures for a screen has no offsets to keep: committing would only put a round
    // trip to the group coordinator between its fetches.
  },
  { commit: false },
);
await new Promise((r) => setTimeout(r, 3000)); // the reader joins its group

// Ticks in steps of STEP_MS on a fixed schedule (a late step does not shift the ones after it),
// cycling through the underlyings: at the default rate and step, 500 ticks every 50 ms, each
// underlying once a step. BENCH_STEP_MS=10 spreads the same rate over 100 ticks every 10 ms: the
// engine then flushes more often with fewer ticks each, and publishes more exposures in all.
async function stream(seconds: number): Promise<void> {
  const perStep = Math.max(1, Math.round((RATE * STEP_MS) / 1000));
  const steps = Math.round((seconds * 1000) / STEP_MS);
  const start = Date.now();
  for (let s = 0; s < steps; s++) {
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
    await new Promise((r) => setTimeout(r, Math.max(0, start + (s + 1) * STEP_MS - Date.now())));
  }
}

async function measureLatency(intervalMs: number): Promise<Latencies> {
  await startLive(intervalMs);
  pending = new Map();
  sample = { total: [], toValued: [], valuedToProduced: [], producedToRead: [] };
  // This process is the load generator and the reader: a major collection of its heap (it held
  // the book and the backlog) in the middle of the run would be charged to the engine. It let go
  // of them; collect now (npm run bench passes --expose-gc).
  (globalThis as { gc?: () => void }).gc?.();
  // The first WARMUP_SECONDS are not measured: the engine, the broker and the reader come out of
  // an idle pause (a restart, the reader's join) into a steady stream.
  await stream(WARMUP_SECONDS);
  measureFrom = Date.now();
  await stream(LATENCY_SECONDS);
  await new Promise((r) => setTimeout(r, 2000));
  measureFrom = Number.POSITIVE_INFINITY;
  const got = sample!;
  sample = undefined;
  await engine.stop();
  for (const xs of [got.total, got.toValued, got.valuedToProduced, got.producedToRead])
    xs.sort((a, b) => a - b);
  return got;
}
const latencies: [number, Latencies][] = [];
for (const ms of LATENCY_INTERVALS) latencies.push([ms, await measureLatency(ms)]);
if (dump) (await import('node:fs')).writeFileSync(process.env.BENCH_LAT_DUMP!, dump.join('\n'));

const pctOf = (xs: number[], p: number) =>
  xs[Math.min(xs.length - 1, Math.floor((p / 100) * xs.length))] ?? Number.NaN;
const both = (xs: number[]) => `${pctOf(xs, 50)} / ${pctOf(xs, 99)}`;

console.log(
  `publish of ${TICKS} ticks (kafkajs producer, idempotent, acks=all): ${(TICKS / publishS).toFixed(0)} msg/s`,
);
for (const [k, r] of rounds.entries())
  console.log(
    `drain round ${k + 1}: bare kafkajs consumer ${r.bare.toFixed(0)} ticks/s, keelson run (role all) ${r.engine.toFixed(0)} ticks/s: ${(r.engine / r.bare).toFixed(3)}`,
  );
console.log(
  `ratio engine / bare consumer:  ${medianRatio.toFixed(3)}, the median of ${rounds.length} rounds (${ratios.map((x) => x.toFixed(3)).join(', ')})`,
);
console.log(
  `  for context: the bare consumer JSON-parsing each value ${parseRate.toFixed(0)} ticks/s (${(parseRate / bareRate).toFixed(3)} of the median bare; ${sink} parsed), on Keelson's kafkajs fast paths ${decoderRate.toFixed(0)} ticks/s (${(decoderRate / bareRate).toFixed(3)})`,
);
for (const [ms, l] of latencies) {
  console.log(
    `tick-to-exposure at ${RATE} ticks/s (every ${STEP_MS} ms) for ${LATENCY_SECONDS}s, publish interval ${ms} ms: p50 ${pctOf(l.total, 50)} ms, p99 ${pctOf(l.total, 99)} ms, max ${l.total.at(-1)} ms over ${l.total.length} ticks`,
  );
  console.log(
    `  p50 / p99 of tick to valuation ${both(l.toValued)} ms, valuation to produce ${both(l.valuedToProduced)} ms, produce to reader ${both(l.producedToRead)} ms`,
  );
}

if (process.env.BENCH_ENGINE_LOG)
  (await import('node:fs')).writeFileSync(process.env.BENCH_ENGINE_LOG, engine.log());
await reader.close();
await producer.close();
const topics = (await admin.listTopics()).filter((t) => t.startsWith(prefix));
await admin.deleteTopics({ topics }).catch(() => undefined);
await admin.disconnect();
process.exit(0);
