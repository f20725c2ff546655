// `keelson sim --brokers ...`: puts the simulated market and trade flow (or a tape) on Kafka's input
// topics, keyed per the contract, so that `keelson run --brokers` has something to chew on.
import { readFile } from 'node:fs/promises';
import { parseArgs } from 'node:util';
import type { CommandIo } from '../main.ts';

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
  -h, --help
`;

function numOpt(name: string, raw: string | undefined, min: number): number | undefined {
  if (raw === undefined) return undefined;
  const n = Number(raw);
  if (!Number.isFinite(n) || n < min) throw new Error(`--${name} must be a number >= ${min}, got '${raw}'`);
  return n;
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
  let seed, underlyings, trades, speed, stepMs, duration;
  try {
    seed = numOpt('seed', values.seed, 0) ?? 1;
    underlyings = numOpt('underlyings', values.underlyings, 1);
    trades = numOpt('trades', values.trades, 0);
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

  try {
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
      bus,
      clock: { now: () => Date.now() },
      stepMs,
      onError: (err) => io.stderr.write(`keelson sim: publish failed: ${(err as Error).message}\n`),
    });
    const boot = await feeder.publishBootstrap();
    io.stdout.write(
      `published the bootstrap: ${boot} messages to ${bus.topicPrefix}* on ${bus.connection.brokers.join(',')}\n`,
    );
    if (values['bootstrap-only']) return 0;

    feeder.start();
    await new Promise<void>((resolve) => {
      const done = () => {
        process.off('SIGINT', done);
        process.off('SIGTERM', done);
        resolve();
      };
      process.on('SIGINT', done);
      process.on('SIGTERM', done);
      if (duration !== undefined) setTimeout(done, duration * 1000);
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
  }
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
