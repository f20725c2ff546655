// The broker goes away mid-stream and comes back: `keelson run` reports itself not ready while it
// is gone, and afterwards the exposures on the topic are still those `keelson replay` gives.
// Runs against a private broker from deploy/local-kafka (a shared one must not be stopped).
import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { KafkaBus, ensureTopics, topicPlan } from '@keelson/bus';
import type { BusRecord } from '@keelson/bus';
import { MarketSim } from '@keelson/sim';
import { decodeInput, inputKey, inputTopic } from '@keelson/shared-types';
import type { ExposureMsg } from '@keelson/shared-types';
import { routeMalformed } from '@keelson/runtime';
import { run as replay } from '../services/cli/src/commands/replay.ts';
import { publishTape } from '../services/cli/src/commands/sim.ts';
import { requireKafka, runLocalKafka, uniquePrefix } from './support/kafka.ts';

const haveTools = ['java', 'mvn'].every(
  (c) => spawnSync('sh', ['-c', `command -v ${c}`], { stdio: 'ignore' }).status === 0,
);
if (!haveTools) {
  if (requireKafka) throw new Error('REQUIRE_KAFKA=1 but java or mvn is missing for the broker restart test');
  process.stderr.write('\n*** KAFKA RESTART TEST SKIPPED: it needs java and mvn for a private broker.\n');
}
const port = 19000 + Math.floor(Math.random() * 900);
const brokers = [`127.0.0.1:${port}`];
const bin = join(process.cwd(), 'services', 'cli', 'bin', 'keelson.js');

async function until(
  what: string,
  ok: () => boolean | Promise<boolean>,
  timeoutMs: number,
  log?: () => string,
): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  while (!(await ok())) {
    if (Date.now() > deadline)
      throw new Error(`timed out waiting for ${what}${log ? `\n--- log tail:\n${log().slice(-3000)}` : ''}`);
    await new Promise((r) => setTimeout(r, 250));
  }
}

async function readyz(
  url: string,
): Promise<{ status: number; body: { checks: Record<string, { ok: boolean }> } } | undefined> {
  try {
    const res = await fetch(`${url}/readyz`);
    return { status: res.status, body: (await res.json()) as { checks: Record<string, { ok: boolean }> } };
  } catch {
    return undefined;
  }
}

describe.skipIf(!haveTools)('keelson run across a broker restart', () => {
  let child: ChildProcess | undefined;
  const buses: KafkaBus[] = [];
  afterAll(async () => {
    if (child && child.exitCode === null) child.kill('SIGKILL');
    await Promise.allSettled(buses.map((b) => b.close()));
    await runLocalKafka('stop', ['--port', String(port)]).catch(() => undefined);
    // A private instance: its data has no use after the test.
    rmSync(join(process.cwd(), 'deploy', 'local-kafka', '.run', `plain-${port}`), {
      recursive: true,
      force: true,
    });
  });

  it('goes unready while the broker is down, recovers, and ends equal to the replay', async () => {
    await runLocalKafka('start', ['--port', String(port), '--fresh']);

    const startMs = Date.parse('2026-03-02T14:00:00Z');
    const sim = new MarketSim({ seed: 5, startMs, underlyings: 12, trades: 150, malformedPerMinute: 0 });
    const lines = sim.bootstrap().map((m) => JSON.stringify(m));
    for (let t = 250; t <= 20_000; t += 250)
      for (const m of sim.step(startMs + t).messages) lines.push(JSON.stringify(m));
    const dir = mkdtempSync(join(tmpdir(), 'keelson-restart-'));
    writeFileSync(join(dir, 'tape.jsonl'), lines.join('\n') + '\n');
    const sink = { write: () => true } as unknown as NodeJS.WritableStream;
    expect(
      await replay([join(dir, 'tape.jsonl'), '--out', join(dir, 'out')], {
        stdin: process.stdin,
        stdout: sink,
        stderr: sink,
      }),
    ).toBe(0);
    const want = readFileSync(join(dir, 'out', 'exposures.jsonl'), 'utf8')
      .split('\n')
      .filter(Boolean)
      .map((l) => JSON.parse(l) as ExposureMsg);

    const prefix = uniquePrefix();
    const producer = new KafkaBus({ brokers, env: {}, topicPrefix: prefix });
    buses.push(producer);
    const admin = producer.admin();
    await admin.connect();
    await ensureTopics(admin, prefix, topicPlan({ partitions: 3 }));
    await admin.disconnect();
    const deps = { decodeInput, inputKey, inputTopic, routeMalformed };
    const half = Math.floor(lines.length / 2);
    await publishTape(producer, lines.slice(0, half).join('\n'), deps);

    let log = '';
    child = spawn(
      process.execPath,
      [
        bin,
        'run',
        '--brokers',
        brokers[0]!,
        '--topic-prefix',
        prefix,
        '--group',
        `${prefix}g`,
        '--clock',
        'event',
        '--port',
        '0',
        '--decay-interval',
        '1',
      ],
      {
        stdio: ['ignore', 'pipe', 'pipe'],
      },
    );
    child.stdout!.on('data', (d: Buffer) => (log += d.toString()));
    child.stderr!.on('data', (d: Buffer) => (log += d.toString()));
    await until(
      'the http url',
      () => /"url":"(http:[^"]+)"/.test(log),
      60_000,
      () => log,
    );
    const url = /"url":"(http:[^"]+)"/.exec(log)![1]!;
    await until(
      'ready',
      async () => (await readyz(url))?.status === 200,
      60_000,
      () => log,
    );

    await runLocalKafka('stop', ['--port', String(port)]);
    await until(
      'not ready while the broker is down',
      async () => {
        const r = await readyz(url);
        return r?.status === 503 && r.body.checks.busConnected?.ok === false;
      },
      60_000,
      () => log,
    );
    await runLocalKafka('start', ['--port', String(port)]);
    await publishTape(producer, lines.slice(half).join('\n'), deps);
    await until(
      'ready again',
      async () => (await readyz(url))?.status === 200,
      90_000,
      () => log,
    );

    const latest = new Map<string, BusRecord>();
    const reader = new KafkaBus({ brokers, env: {}, topicPrefix: prefix, groupId: `${prefix}reader` });
    buses.push(reader);
    await reader.subscribe(['exposures'], async (batch) => {
      for (const r of batch) latest.set(r.key ?? '', r);
    });
    await until(
      'the replay exposures',
      () =>
        want.every((w) => {
          const r = latest.get(w.nodeKey);
          if (!r) return false;
          const g = JSON.parse(r.value) as ExposureMsg;
          return (
            g.asOf === w.asOf &&
            g.positions === w.positions &&
            Math.abs(g.pv - w.pv) <= 1e-9 * Math.max(1, Math.abs(w.pv))
          );
        }),
      90_000,
      () => log,
    );
    child.kill('SIGTERM');
    await new Promise((r) => child!.on('exit', r));
    expect(child.exitCode).toBe(0);
  }, 300_000);
});
