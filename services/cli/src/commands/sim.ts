// `keelson sim --brokers ...`: puts the simulated market and trade flow (or a tape) on Kafka's input
// topics, keyed per the contract, so that `keelson run --brokers` has something to chew on.
import { readFile } from 'node:fs/promises';
import { parseArgs } from 'node:util';
import type { Bus } from '@keelson/bus';
import type { CommandIo } from '../main.ts';
import { numberOption } from '../options.ts';

const HELP = `usage: keelson sim --brokers HOST:PORT[,...] [options]

Publishes the simulator's bootstrap (reference data, curves, surfaces, spots, limits, the initial
book) and then its live feed, stamped with the wall clock, to the input topics. With --tape, it
publishes the lines of a tape file instead, in file order (lines that are not valid input go to the
topic their "type" names, else to trades, where the engine dead-letters them).

options:
  --brokers LIST        (default: KAFKA_BROKERS)
  --topic-prefix P      (default: KAFKA_TOPIC_PREFIX, else 'keelson.')
  --seed N              (default 1)
  --underlyings N       simulator universe size (simulator default when unset)
  --trades N            initial book size (simulator default when unset)
  --speed X             market moves per wall time (default 1)
  --step-ms MS          wall time between publishes (default 100)
  --duration SECONDS    stop after this long (default: run until interrupted)
  --bootstrap-only      publish the bootstrap and exit
  --tape FILE           publish this tape instead of the simulator, then exit
  --port N / --host ADDR
                        serve /healthz, /readyz and /metrics here while feeding (default: no
                        HTTP; --port 0 picks a free port, --host defaults to 127.0.0.1)
  -h, --help
`;

function numOpt(name: string, raw: string | undefined, min: number): number | undefined {
  return numberOption(name, raw, { min });
}

/** Counts and seeds: a fractional value would be silently truncated somewhere downstream. */
function intOpt(name: string, raw: string | undefined, min: number): number | undefined {
  return numberOption(name, raw, { min, integer: true });
}

export async function run(argv: string[], io: CommandIo): Promise<number> {
  let values;
  try {
    ({ values } = parseArgs({
      args: argv,
      strict: true,
      allowPositionals: false,
      options: {
        brokers: { type: 'string' },
        'topic-prefix': { type: 'string' },
        seed: { type: 'string' },
        underlyings: { type: 'string' },
        trades: { type: 'string' },
        speed: { type: 'string' },
        'step-ms': { type: 'string' },
        duration: { type: 'string' },
        'bootstrap-only': { type: 'boolean' },
        tape: { type: 'string' },
        host: { type: 'string' },
        port: { type: 'string' },
        help: { type: 'boolean', short: 'h' },
      },
    }));
  } catch (e) {
    io.stderr.write(`keelson sim: ${(e as Error).message}\n\n${HELP}`);
    return 1;
  }
  if (values.help) {
    io.stdout.write(HELP);
    return 0;
  }

  const [{ KafkaBus }, { SimFeeder, routeMalformed }, { MarketSim }, { decodeInput, inputKey, inputTopic }] =
    await Promise.all([
      import('@keelson/bus'),
      import('@keelson/runtime'),
      import('@keelson/sim'),
      import('@keelson/shared-types'),
    ]);
  let bus;
  let seed, underlyings, trades, speed, stepMs, duration, port;
  try {
    port = intOpt('port', values.port, 0);
    if (port !== undefined && port > 65535)
      throw new Error(`--port must be an integer in 0..65535, got '${values.port}'`);
    seed = intOpt('seed', values.seed, 0) ?? 1;
    underlyings = intOpt('underlyings', values.underlyings, 1);
    trades = intOpt('trades', values.trades, 0);
    speed = numOpt('speed', values.speed, 0) ?? 1;
    stepMs = numOpt('step-ms', values['step-ms'], 1) ?? 100;
    duration = numOpt('duration', values.duration, 0);
    bus = new KafkaBus({
      ...(values.brokers !== undefined ? { brokers: values.brokers } : {}),
      ...(values['topic-prefix'] !== undefined ? { topicPrefix: values['topic-prefix'] } : {}),
      clientId: 'keelson-sim',
    });
  } catch (e) {
    io.stderr.write(`keelson sim: ${(e as Error).message}\n`);
    return 1;
  }

  const health = new FeedHealth();
  let http: { url: string; close(): Promise<void> } | undefined;
  try {
    if (port !== undefined || values.host !== undefined)
      http = await serveFeedHealth(health, values.host ?? '127.0.0.1', port ?? 9400);
    if (http) io.stdout.write(`sim http on ${http.url}\n`);
    if (values.tape !== undefined) {
      const n = await publishTape(bus, await readFile(values.tape, 'utf8'), {
        decodeInput,
        inputKey,
        inputTopic,
        routeMalformed,
      });
      io.stdout.write(
        `published ${n} tape lines to ${bus.topicPrefix}* on ${bus.connection.brokers.join(',')}\n`,
      );
      return 0;
    }

    const source = new MarketSim({
      seed,
      startMs: Date.now(),
      marketSpeed: speed,
      ...(underlyings !== undefined ? { underlyings } : {}),
      ...(trades !== undefined ? { trades } : {}),
    });
    const feeder = new SimFeeder({
      source,
      // The feeder routes a malformed line by its type alone, which can leave it keyless on a
      // compacted topic; the broker refuses those, so they are re-routed as a tape's are.
      bus: poisonSafe(bus, { decodeInput, inputKey, inputTopic, routeMalformed }),
      clock: { now: () => Date.now() },
      stepMs,
      onError: (err) => {
        health.failed(err);
        io.stderr.write(`keelson sim: publish failed: ${(err as Error).message}\n`);
      },
    });
    health.stats = () => feeder.stats();
    const boot = await feeder.publishBootstrap();
    health.bootstrapped(boot);
    io.stdout.write(
      `published the bootstrap: ${boot} messages to ${bus.topicPrefix}* on ${bus.connection.brokers.join(',')}\n`,
    );
    if (values['bootstrap-only']) return 0;

    feeder.start();
    health.live = true;
    await new Promise<void>((resolve) => {
      // A pending --duration timer would keep the process alive after a signal.
      let timer: NodeJS.Timeout | undefined;
      const done = () => {
        clearTimeout(timer);
        process.off('SIGINT', done);
        process.off('SIGTERM', done);
        resolve();
      };
      process.on('SIGINT', done);
      process.on('SIGTERM', done);
      if (duration !== undefined) timer = setTimeout(done, duration * 1000);
    });
    await feeder.stop();
    const st = feeder.stats();
    io.stdout.write(
      `published ${st.published} messages and ${st.malformed} malformed lines in ${st.steps} steps\n`,
    );
    return 0;
  } catch (e) {
    io.stderr.write(`keelson sim: ${(e as Error).message}\n`);
    return 1;
  } finally {
    await bus.close();
    await http?.close();
  }
}

/**
 * What the feed's HTTP endpoints report. Ready: the bootstrap is on the topics and no step has
 * failed since the last one that published (the feeder's steps are sequential, so a step that
 * completes after a failure proves the broker takes records again).
 */
class FeedHealth {
  live = false;
  bootstrap = -1;
  lastError: string | undefined;
  errors = 0;
  private stepsAtError = -1;
  stats: () => { steps: number; published: number; malformed: number } = () => ({
    steps: 0,
    published: 0,
    malformed: 0,
  });
  bootstrapped(n: number): void {
    this.bootstrap = n;
  }
  failed(err: unknown): void {
    this.errors++;
    this.lastError = (err as Error).message;
    this.stepsAtError = this.stats().steps;
  }
  checks(): Record<string, { ok: boolean; detail: string }> {
    const st = this.stats();
    const recovered = this.lastError === undefined || st.steps > this.stepsAtError + 1;
    return {
      bootstrapPublished: {
        ok: this.bootstrap >= 0,
        detail: this.bootstrap >= 0 ? `${this.bootstrap} messages` : 'publishing the bootstrap',
      },
      feedPublishing: {
        ok: this.live && recovered,
        detail: !this.live
          ? 'not started'
          : recovered
            ? `${st.steps} steps`
            : `last publish failed: ${this.lastError}`,
      },
    };
  }
}

/** Prometheus text exposition (format 0.0.4) of the feed's counters, written out by hand: five lines. */
function feedMetrics(h: FeedHealth): string {
  const st = h.stats();
  const ready = Object.values(h.checks()).every((c) => c.ok) ? 1 : 0;
  const rows: [string, 'counter' | 'gauge', string, number][] = [
    ['keelson_sim_steps_total', 'counter', 'Feed steps taken.', st.steps],
    [
      'keelson_sim_published_messages_total',
      'counter',
      'Valid messages published (bootstrap included).',
      st.published,
    ],
    [
      'keelson_sim_malformed_lines_total',
      'counter',
      'Malformed lines published for the engine to dead-letter.',
      st.malformed,
    ],
    ['keelson_sim_publish_errors_total', 'counter', 'Steps whose publish failed.', h.errors],
    ['keelson_sim_ready', 'gauge', '1 when the bootstrap is published and the feed publishes.', ready],
  ];
  return rows.map(([n, t, help, v]) => `# HELP ${n} ${help}\n# TYPE ${n} ${t}\n${n} ${v}\n`).join('');
}

async function serveFeedHealth(
  h: FeedHealth,
  host: string,
  port: number,
): Promise<{ url: string; close(): Promise<void> }> {
  const { createServer } = await import('node:http');
  const server = createServer((req, res) => {
    const path = (req.url ?? '/').split('?')[0];
    const send = (status: number, type: string, body: string, extra: Record<string, string> = {}) => {
      res.writeHead(status, { 'content-type': type, 'cache-control': 'no-store', ...extra });
      res.end(req.method === 'HEAD' ? undefined : body);
    };
    if (path !== '/healthz' && path !== '/readyz' && path !== '/metrics')
      return send(404, 'application/json', JSON.stringify({ error: `no such path: ${path}` }));
    if (req.method !== 'GET' && req.method !== 'HEAD')
      return send(405, 'application/json', JSON.stringify({ error: 'method not allowed' }), {
        allow: 'GET, HEAD',
      });
    if (path === '/healthz') return send(200, 'application/json', JSON.stringify({ ok: true }));
    if (path === '/metrics') return send(200, 'text/plain; version=0.0.4; charset=utf-8', feedMetrics(h));
    const checks = h.checks();
    const waitingFor = Object.keys(checks).filter((k) => !checks[k]!.ok);
    send(
      waitingFor.length ? 503 : 200,
      'application/json',
      JSON.stringify({ ready: waitingFor.length === 0, checks, waitingFor }),
    );
  });
  await new Promise<void>((resolve, reject) => {
    server.once('error', reject);
    server.listen(port, host, () => resolve());
  });
  const addr = server.address();
  const actual = typeof addr === 'object' && addr ? addr.port : port;
  return {
    url: `http://${host.includes(':') ? `[${host}]` : host}:${actual}`,
    close: () =>
      new Promise<void>((resolve) => {
        server.closeAllConnections();
        server.close(() => resolve());
      }),
  };
}

/**
 * Where an invalid line goes: as routeMalformed decides (the topic its type names), with the key
 * that topic is keyed by when the line has it. A compacted topic refuses records without a key, so
 * a keyless line goes to trades instead, where the engine dead-letters it like any other.
 */
function routePoison(
  line: string,
  deps: TapeDeps,
): { topic: string; record: { key: string | null; value: string } } {
  const routed = deps.routeMalformed(line);
  let key = routed.record.key;
  try {
    const o = JSON.parse(line) as Record<string, unknown>;
    for (const f of ['underlying', 'currency', 'limitId'])
      if (key === null && typeof o[f] === 'string') key = o[f] as string;
  } catch {
    // not JSON: no key to find
  }
  if (key === null) return { topic: 'trades', record: { key: null, value: line } };
  return { topic: routed.topic, record: { key, value: line } };
}

/**
 * A bus whose keyless records to any topic but trades are re-routed with routePoison: only a
 * malformed line can be keyless (every valid input has its contract key), and a compacted topic
 * refuses a record without a key (InvalidRecord), which would fail the whole step's publish.
 */
export function poisonSafe(bus: Bus, deps: TapeDeps): Bus {
  return {
    publish: async (topic, records) => {
      if (topic === 'trades' || records.every((r) => r.key !== null)) return bus.publish(topic, records);
      const keep = records.filter((r) => r.key !== null);
      if (keep.length) await bus.publish(topic, keep);
      for (const r of records) {
        if (r.key !== null) continue;
        const routed = routePoison(r.value, deps);
        await bus.publish(routed.topic, [routed.record]);
      }
    },
    subscribe: (topics, handler) => bus.subscribe(topics, handler),
    close: () => bus.close(),
  };
}

interface TapeDeps {
  decodeInput: typeof import('@keelson/shared-types').decodeInput;
  inputKey: typeof import('@keelson/shared-types').inputKey;
  inputTopic: typeof import('@keelson/shared-types').inputTopic;
  routeMalformed: typeof import('@keelson/runtime').routeMalformed;
}

/**
 * Publishes tape lines in order, each line's raw text as the record value (so a dead letter shows
 * exactly what was sent); runs of one topic go in one request.
 */
export async function publishTape(
  bus: { publish(topic: string, records: { key: string | null; value: string }[]): Promise<void> },
  text: string,
  deps: TapeDeps,
): Promise<number> {
  const lines = text.split('\n').filter((l) => l.trim() !== '');
  let run: { key: string | null; value: string }[] = [];
  let runTopic = '';
  for (const line of lines) {
    const d = deps.decodeInput(line);
    const { topic, record } = d.ok
      ? { topic: deps.inputTopic(d.msg) as string, record: { key: deps.inputKey(d.msg), value: line } }
      : routePoison(line, deps);
    if (topic !== runTopic && run.length) {
      await bus.publish(runTopic, run);
      run = [];
    }
    runTopic = topic;
    run.push(record);
  }
  if (run.length) await bus.publish(runTopic, run);
  return lines.length;
}
