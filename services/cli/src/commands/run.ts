// `keelson run`: the pipeline. With no brokers (neither --brokers nor KAFKA_BROKERS), the embedded
// default: in-process bus, simulator in real time, engine runner, HTTP server, live summary. With
// brokers, the Kafka runner of @keelson/bus, which takes its own options.
import { parseArgs } from 'node:util';
import type { CommandIo } from '../main.ts';
import { numberOption, UsageError } from '../options.ts';

const HELP = `usage: keelson run [options]

Runs the risk pipeline. Without brokers: everything in this process (simulated market, in-process
bus, engine, HTTP on ${'127.0.0.1:9400'}). With --brokers (or KAFKA_BROKERS): on Kafka.

embedded options:
  --port N                 HTTP port (default 9400; 0 picks a free one, printed in the log)
  --host ADDR              HTTP listen address (default 127.0.0.1)
  --token T                bearer token for /exposures, /alerts, /events and /metrics
                           (default: KEELSON_HTTP_TOKEN; unset = open)
  --open-metrics           with a token, leave /metrics open for a scraper without credentials
  --seed N                 simulator seed (default 1)
  --speed X                simulated market moves X times faster than real time (default 1)
  --underlyings N          simulated underlyings (simulator default when unset)
  --trades N               initial simulated book size (simulator default when unset)
  --duration SECONDS       stop by itself this long after becoming ready
  --decay-interval SECONDS revalue the whole book this often for time decay (default 60; 0 = never)
  --publish-interval MS    exposures coalesced per node and published at most this often (default 100)
  --stale-after SECONDS    a spot older than this marks its positions stale (default 5)
  --reporting-currency CCY (default USD)
  --log-level LEVEL        pino level: fatal, error, warn, info, debug, trace (default info)
  --quiet                  no live summary on stdout
  --brokers LIST           host:port,... run on Kafka instead ('keelson run --brokers LIST --help'
                           lists the Kafka options)
  -h, --help
`;

function positive(
  name: string,
  raw: string | undefined,
  fallback: number,
  { allowZero = false, integer = false } = {},
): number {
  return numberOption(name, raw, { min: 0, strict: !allowZero, integer }) ?? fallback;
}

function brokersFrom(argv: string[]): string | undefined {
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i]!;
    if (a === '--brokers') return argv[i + 1];
    if (a.startsWith('--brokers=')) return a.slice('--brokers='.length);
  }
  return process.env.KAFKA_BROKERS || undefined;
}

async function runKafka(argv: string[], io: CommandIo, brokers: string): Promise<number> {
  // The Kafka runner parses its own options (roles, clock, group, topic prefix, security).
  const { runOnKafka } = await import('@keelson/bus');
  return runOnKafka({ argv, io, brokers });
}

export async function run(argv: string[], io: CommandIo): Promise<number> {
  const brokers = brokersFrom(argv);
  if (brokers) return runKafka(argv, io, brokers);
  if (argv.includes('-h') || argv.includes('--help')) {
    io.stdout.write(HELP);
    return 0;
  }

  let values: Record<string, string | boolean | undefined>;
  try {
    ({ values } = parseArgs({
      args: argv,
      strict: true,
      allowPositionals: false,
      options: {
        port: { type: 'string' },
        host: { type: 'string' },
        token: { type: 'string' },
        'open-metrics': { type: 'boolean' },
        seed: { type: 'string' },
        speed: { type: 'string' },
        underlyings: { type: 'string' },
        trades: { type: 'string' },
        duration: { type: 'string' },
        'decay-interval': { type: 'string' },
        'publish-interval': { type: 'string' },
        'stale-after': { type: 'string' },
        'reporting-currency': { type: 'string' },
        'log-level': { type: 'string' },
        quiet: { type: 'boolean' },
      },
    }));
  } catch (err) {
    io.stderr.write(`keelson run: ${err instanceof Error ? err.message : String(err)}\n\n${HELP}`);
    return 1;
  }

  let cfg;
  try {
    const str = (k: string) => values[k] as string | undefined;
    const ccy = str('reporting-currency');
    if (ccy !== undefined && !/^[A-Z]{3}$/.test(ccy))
      throw new UsageError(`--reporting-currency must be three upper-case letters, got '${ccy}'`);
    const level = str('log-level') ?? 'info';
    if (!['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent'].includes(level))
      throw new UsageError(
        `--log-level must be one of fatal, error, warn, info, debug, trace, silent, got '${level}'`,
      );
    const port = positive('port', str('port'), 9400, { allowZero: true, integer: true });
    if (port > 65535) throw new UsageError(`--port must be <= 65535, got '${port}'`);
    cfg = {
      port,
      host: str('host') ?? '127.0.0.1',
      token: str('token') ?? (process.env.KEELSON_HTTP_TOKEN || undefined),
      guardMetrics: !values['open-metrics'],
      seed: positive('seed', str('seed'), 1, { allowZero: true, integer: true }),
      speed: positive('speed', str('speed'), 1),
      underlyings:
        str('underlyings') === undefined
          ? undefined
          : positive('underlyings', str('underlyings'), 0, { integer: true }),
      trades:
        str('trades') === undefined
          ? undefined
          : positive('trades', str('trades'), 0, { allowZero: true, integer: true }),
      durationMs: str('duration') === undefined ? undefined : positive('duration', str('duration'), 0) * 1000,
      decayIntervalMs: positive('decay-interval', str('decay-interval'), 60, { allowZero: true }) * 1000,
      publishIntervalMs: positive('publish-interval', str('publish-interval'), 100, { allowZero: true }),
      staleAfterMs:
        str('stale-after') === undefined ? undefined : positive('stale-after', str('stale-after'), 5) * 1000,
      reportingCurrency: ccy,
      level,
      quiet: Boolean(values.quiet),
    };
  } catch (err) {
    if (!(err instanceof UsageError)) throw err;
    io.stderr.write(`keelson run: ${err.message}\n`);
    return 1;
  }

  // Loaded here, not at the top: `keelson run --help` and a usage error cost nothing.
  const { startEmbedded, createLogger } = await import('@keelson/runtime');
  const logger = await createLogger({ level: cfg.level });
  const stdoutTty = io.stdout === process.stdout && process.stdout.isTTY === true;
  let rt;
  try {
    rt = await startEmbedded({
      host: cfg.host,
      port: cfg.port,
      ...(cfg.token ? { token: cfg.token } : {}),
      guardMetrics: cfg.guardMetrics,
      seed: cfg.seed,
      speed: cfg.speed,
      ...(cfg.underlyings !== undefined ? { underlyings: cfg.underlyings } : {}),
      ...(cfg.trades !== undefined ? { trades: cfg.trades } : {}),
      decayIntervalMs: cfg.decayIntervalMs,
      publishIntervalMs: cfg.publishIntervalMs,
      ...(cfg.staleAfterMs !== undefined ? { staleAfterMs: cfg.staleAfterMs } : {}),
      ...(cfg.reportingCurrency ? { reportingCurrency: cfg.reportingCurrency } : {}),
      logger,
      ...(cfg.quiet ? {} : { summary: { out: io.stdout, tty: stdoutTty } }),
    });
  } catch (err) {
    const e = err as NodeJS.ErrnoException;
    const why =
      e.code === 'EADDRINUSE' ? `${cfg.host}:${cfg.port} is already in use (try --port 0)` : e.message;
    logger.error({ err }, 'start failed');
    io.stderr.write(`keelson run: could not start: ${why}\n`);
    return 1;
  }
  io.stdout.write(`keelson: listening on ${rt.url}\n`);

  const reason = await new Promise<string>((resolve) => {
    // Whichever comes first wins; the others are removed so they never fire into a stopped runtime.
    const finish = (why: string) => {
      process.off('SIGINT', onSignal);
      process.off('SIGTERM', onSignal);
      if (timer) clearTimeout(timer);
      resolve(why);
    };
    const onSignal = (sig: NodeJS.Signals) => finish(sig);
    process.on('SIGINT', onSignal);
    process.on('SIGTERM', onSignal);
    const timer = cfg.durationMs !== undefined ? setTimeout(() => finish('duration'), cfg.durationMs) : null;
  });
  logger.info({ reason }, 'stopping');
  await rt.stop();
  if (!cfg.quiet) io.stdout.write(`${stdoutTty ? '\n' : ''}keelson: stopped (${reason}) ${rt.finalLine()}\n`);
  return 0;
}
