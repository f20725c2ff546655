// Kafka mode end to end on a real broker: a tape goes onto the topics, `keelson run --brokers`
// consumes it, and what lands on the output topics is checked against `keelson replay` of the same
// tape (the embedded reference: same engine, file order, no broker).
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { KafkaBus, ensureTopics, topicPlan } from '@keelson/bus';
import type { BusRecord } from '@keelson/bus';
import { MarketSim } from '@keelson/sim';
import { METRICS, decodeInput, inputKey, inputTopic } from '@keelson/shared-types';
import type { ExposureMsg, RejectedMsg } from '@keelson/shared-types';
import { routeMalformed } from '@keelson/runtime';
import { run as replay } from '../services/cli/src/commands/replay.ts';
import { publishTape } from '../services/cli/src/commands/sim.ts';
import { findBroker, uniquePrefix } from './support/kafka.ts';

const broker = await findBroker();
const brokers = broker?.brokers ?? [];
const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');
const deps = { decodeInput, inputKey, inputTopic, routeMalformed };

/** A tape from the simulator (invented scenario), with poison lines of several kinds mixed in. */
function makeTape(seed: number): { bootstrap: string[]; flow: string[]; poison: string[] } {
  const startMs = Date.parse('2026-03-02T14:00:00Z');
  const sim = new MarketSim({ seed, startMs, underlyings: 16, trades: 240, malformedPerMinute: 0 });
  const bootstrap = sim.bootstrap().map((m) => JSON.stringify(m));
  const flow: string[] = [];
  for (let t = 250; t <= 30_000; t += 250)
    for (const m of sim.step(startMs + t).messages) flow.push(JSON.stringify(m));
  const poison = [
    'not json at all',
    '{"type":"spot","underlying":"ZEPHYR-X","price":-3,"ts":"2026-03-02T14:00:10Z"}',
    '{"type":"trade","tradeId":"P-1","version":0,"action":"new","underlying":"ZEPHYR-X","ts":"2026-03-02T14:00:11Z"}',
    '{"type":"vol-surface","underlying":"ZEPHYR-X","ts":"2026-03-02T14:00:12Z","expiries":[],"strikes":[],"vols":[]}',
    '{"type":"curve","currency":"usd","ts":"2026-03-02T14:00:13Z","tenors":[1],"zeroRates":[0.01]}',
  ];
  return { bootstrap, flow, poison };
}

async function replayOf(lines: string[]): Promise<{ exposures: ExposureMsg[]; rejected: RejectedMsg[] }> {
  const dir = mkdtempSync(join(tmpdir(), 'keelson-replay-'));
  const tape = join(dir, 'tape.jsonl');
  writeFileSync(tape, lines.join('\n') + '\n');
  const sink = { write: () => true } as unknown as NodeJS.WritableStream;
  const code = await replay([tape, '--out', join(dir, 'out')], {
    stdin: process.stdin,
    stdout: sink,
    stderr: sink,
  });
  expect(code).toBe(0);
  const read = <T>(f: string): T[] =>
    readFileSync(join(dir, 'out', f), 'utf8')
      .split('\n')
      .filter(Boolean)
      .map((l) => JSON.parse(l) as T);
  return { exposures: read<ExposureMsg>('exposures.jsonl'), rejected: read<RejectedMsg>('rejected.jsonl') };
}

function keelson(args: string[]): { child: ChildProcess; log: () => string; exited: Promise<number | null> } {
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

/** Latest record per key of a topic, kept current by a consumer of its own. */
async function follow(prefix: string, topic: string, buses: KafkaBus[]) {
  const latest = new Map<string, BusRecord>();
  const all: BusRecord[] = [];
  const bus = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}reader-${topic}` });
  buses.push(bus);
  await bus.subscribe([topic], async (batch) => {
    for (const r of batch) {
      all.push(r);
      latest.set(r.key ?? '', r);
    }
  });
  return { latest, all };
}

async function until(what: string, ok: () => boolean, timeoutMs: number, log?: () => string): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  while (!ok()) {
    if (Date.now() > deadline)
      throw new Error(
        `timed out waiting for ${what}${log ? `\n--- process log tail:\n${log().slice(-3000)}` : ''}`,
      );
    await new Promise((r) => setTimeout(r, 200));
  }
}

/** Resolves once `records` has not grown for `quietMs`. */
async function quiet(records: unknown[], quietMs: number, timeoutMs: number): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  let seen = records.length;
  let since = Date.now();
  while (Date.now() - since < quietMs) {
    if (Date.now() > deadline) throw new Error(`the topic never went quiet for ${quietMs} ms`);
    await new Promise((r) => setTimeout(r, 100));
    if (records.length !== seen) {
      seen = records.length;
      since = Date.now();
    }
  }
}

/** Equal as a risk report: same counts and flags, amounts equal to a relative tolerance. */
function expectSameExposure(got: ExposureMsg, want: ExposureMsg, relTol: number): void {
  expect({
    nodeKey: got.nodeKey,
    positions: got.positions,
    unpriced: got.unpriced,
    stale: got.stale,
    currency: got.currency,
  }).toEqual({
    nodeKey: want.nodeKey,
    positions: want.positions,
    unpriced: want.unpriced,
    stale: want.stale,
    currency: want.currency,
  });
  for (const m of METRICS) {
    const g = got[m];
    const w = want[m];
    if (w === null || g === null) {
      expect(g, `${want.nodeKey} ${m}`).toBe(w);
      continue;
    }
    const scale = Math.max(1, Math.abs(w));
    expect(Math.abs(g - w) / scale, `${want.nodeKey} ${m}: ${g} vs ${w}`).toBeLessThanOrEqual(relTol);
  }
}

describe.skipIf(!broker)('keelson run on Kafka', () => {
  const buses: KafkaBus[] = [];
  const children: ChildProcess[] = [];
  afterAll(async () => {
    for (const c of children) if (c.exitCode === null) c.kill('SIGKILL');
    await Promise.allSettled(buses.map((b) => b.close()));
  });

  async function topicsFor(partitions: number): Promise<{ prefix: string; producer: KafkaBus }> {
    const prefix = uniquePrefix();
    const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(producer);
    const admin = producer.admin();
    await admin.connect();
    await ensureTopics(admin, prefix, topicPlan({ partitions }));
    await admin.disconnect();
    return { prefix, producer };
  }

  it('--role all --clock event gives the exposures keelson replay gives, and dead-letters every poison record with its origin', async () => {
    const tape = makeTape(11);
    const lines = [...tape.bootstrap, ...tape.flow.slice(0, 200), ...tape.poison, ...tape.flow.slice(200)];
    const want = await replayOf(lines);
    expect(want.exposures.length).toBeGreaterThan(20);
    expect(want.rejected).toHaveLength(tape.poison.length);

    const { prefix, producer } = await topicsFor(3);
    await publishTape(producer, lines.join('\n'), deps);
    const exposures = await follow(prefix, 'exposures', buses);
    const rejected = await follow(prefix, 'rejected', buses);

    const proc = keelson([
      'run',
      '--topic-prefix',
      prefix,
      '--group',
      `${prefix}engine`,
      '--clock',
      'event',
      '--port',
      '0',
      '--decay-interval',
      '1',
    ]);
    children.push(proc.child);
    const done = () =>
      want.exposures.every((w) => {
        const r = exposures.latest.get(w.nodeKey);
        if (!r) return false;
        const g = JSON.parse(r.value) as ExposureMsg;
        return g.asOf === w.asOf && g.positions === w.positions;
      });
    await until('the replay exposures on the topic', done, 90_000, proc.log);
    // A node can reach the final asOf before the last decay run values every instrument at it (a
    // run of spots is valued at its last tick's time): compare once the topic has gone quiet.
    await quiet(exposures.all, 1_000, 30_000);

    for (const w of want.exposures)
      expectSameExposure(JSON.parse(exposures.latest.get(w.nodeKey)!.value) as ExposureMsg, w, 1e-9);
    // Nodes on the topic that the replay's final snapshot leaves out were emptied: their last word is zero.
    const kept = new Set(want.exposures.map((e) => e.nodeKey));
    for (const [k, r] of exposures.latest)
      if (!kept.has(k)) expect((JSON.parse(r.value) as ExposureMsg).positions, k).toBe(0);

    await until('every dead letter', () => rejected.all.length >= tape.poison.length, 30_000, proc.log);
    const dead = rejected.all.map((r) => JSON.parse(r.value) as RejectedMsg);
    expect(dead.map((d) => d.raw).sort()).toEqual([...tape.poison].sort());
    for (const d of dead) {
      expect(d.source).toMatch(/^(spots|trades|vols|curves|refdata|limits) partition \d+ offset \d+$/);
      expect(d.reason.length).toBeGreaterThan(5);
    }
    // Same reasons as the replay gives for the same lines.
    const reasonOf = new Map(want.rejected.map((r) => [r.raw, r.reason]));
    for (const d of dead) expect(d.reason).toBe(reasonOf.get(d.raw));

    proc.child.kill('SIGTERM');
    expect(await proc.exited).toBe(0);
  }, 150_000);

  it('two engines and an aggregator: one engine killed hard mid-stream, no position lost or counted twice', async () => {
    const tape = makeTape(23);
    const lines = [...tape.bootstrap, ...tape.flow];
    const want = await replayOf(lines);
    const firmWant = want.exposures.find((e) => e.nodeKey === 'firm')!;

    const { prefix, producer } = await topicsFor(4);
    const exposures = await follow(prefix, 'exposures', buses);
    const group = `${prefix}engines`;
    const common = ['--topic-prefix', prefix, '--clock', 'event', '--port', '0', '--decay-interval', '1'];
    const agg = keelson(['run', '--role', 'aggregate', '--group', `${prefix}agg`, ...common]);
    const e1 = keelson(['run', '--role', 'engine', '--group', group, '--instance-id', 'e1', ...common]);
    const e2 = keelson(['run', '--role', 'engine', '--group', group, '--instance-id', 'e2', ...common]);
    children.push(agg.child, e1.child, e2.child);
    const logs = () =>
      `[agg]\n${agg.log().slice(-1500)}\n[e1]\n${e1.log().slice(-1500)}\n[e2]\n${e2.log().slice(-1500)}`;
    await until(
      'both engines live',
      () => /live/.test(e1.log()) && /rebuilt from the topics; live/.test(e2.log()),
      60_000,
      logs,
    );

    const half = Math.floor(lines.length * 0.6);
    await publishTape(producer, lines.slice(0, half).join('\n'), deps);
    await until('the aggregator to publish the firm', () => exposures.latest.has('firm'), 60_000, logs);
    e1.child.kill('SIGKILL');
    await e1.exited;
    await publishTape(producer, lines.slice(half).join('\n'), deps);

    const firm = () =>
      exposures.latest.has('firm')
        ? (JSON.parse(exposures.latest.get('firm')!.value) as ExposureMsg)
        : undefined;
    await until(
      'the firm to show the whole book after the takeover',
      () =>
        firm()?.positions === firmWant.positions &&
        Math.abs(firm()!.pv - firmWant.pv) <= 1e-4 * Math.max(1, Math.abs(firmWant.pv)),
      90_000,
      logs,
    );
    // The firm can be whole before every other node's last update has arrived: they are on other
    // partitions of the topic, read separately. Compare once the topic has gone quiet.
    await quiet(exposures.all, 1_000, 30_000);
    // Each partition's engine values at its own event clock (its last input's ts), so amounts may
    // differ from the single-clock replay by a few seconds of decay: compare to 1e-4 relative.
    for (const w of want.exposures) {
      const r = exposures.latest.get(w.nodeKey);
      expect(r, w.nodeKey).toBeDefined();
      const g = JSON.parse(r!.value) as ExposureMsg;
      expect(g.positions, w.nodeKey).toBe(w.positions);
      expect(Math.abs(g.pv - w.pv) / Math.max(1, Math.abs(w.pv)), w.nodeKey).toBeLessThanOrEqual(1e-4);
    }
    e2.child.kill('SIGTERM');
    agg.child.kill('SIGTERM');
    expect(await e2.exited).toBe(0);
    expect(await agg.exited).toBe(0);
  }, 240_000);
});
