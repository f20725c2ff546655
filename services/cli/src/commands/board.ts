// `keelson board`: the desk's live view on Kafka. Reads the engine's outputs (`exposures`, `alerts`)
// and the `limits` input topic (for each limit's bounds) whole, in a consumer group of its own, and
// serves the page, its event stream, JSON snapshots, /healthz, /readyz and /metrics.
//
// The board is a reader: a record it cannot decode is counted, logged and skipped, never
// re-published (dead letters are the engine's job, on its inputs). Every instance reads every
// partition from the beginning (`exposures` is compacted, so that is the latest value per node),
// which is why each runs in its own consumer group.
import { hostname } from 'node:os';
import { parseArgs } from 'node:util';
import type { BusRecord } from '@keelson/bus';
import type { LimitView, Signal, SseHub as SseHubType } from '@keelson/http';
import {
  alertSchema,
  exposureSchema,
  nodeKey,
  staleFeedSchema,
  TOPICS,
  validateInput,
  type AlertMsg,
  type ExposureMsg,
  type LimitMsg,
} from '@keelson/shared-types';
import type { CommandIo } from '../main.ts';
import { numberOption, type NumberRule } from '../options.ts';

const HELP = `usage: keelson board [options]

Serves the desk's live view (the page, /events, /exposures, /alerts) from the Kafka topics the
engine writes: exposures and alerts, plus limits for each limit's bounds.

options:
  --brokers LIST        host:port,... (default: KAFKA_BROKERS; required)
  --port N              HTTP port (default 9410; 0 picks a free one)
  --host ADDR           HTTP listen address (default 127.0.0.1)
  --token T             bearer token for the data endpoints and /metrics
                        (default: KEELSON_HTTP_TOKEN; unset = open). The page passes it to
                        /events as ?access_token=..., so open the page as /?access_token=T
  --group-id ID         consumer group (default keelson-board-<host>-<pid>: every board reads
                        every partition)
  --topic-prefix P      physical topic prefix (default: KAFKA_TOPIC_PREFIX, then 'keelson.')
  --recent-alerts N     alerts and feed events kept for a newly connected page (default 500)
  --duration SECONDS    stop by itself after this long
  --log-level LEVEL     fatal, error, warn, info, debug, trace (default info)
  -h, --help
`;

/** The contract's utilization rule: value / max for value >= 0 with a max, value / min below 0 with a min. */
export function utilizationOf(value: number, max: number | undefined, min: number | undefined): number {
  if (value >= 0 && max !== undefined) return value / max;
  if (value < 0 && min !== undefined) return value / min;
  return 0;
}

export interface BoardSink {
  publishExposure(e: ExposureMsg): void;
  publishAlert(a: Signal): void;
  publishLimit(v: LimitView): void;
}

export type ApplyOutcome = { ok: true } | { ok: false; reason: string };

/** What the board knows from the topics: latest exposure per node, limits, the alert log. */
export class BoardState {
  private readonly nodes = new Map<string, ExposureMsg>();
  private readonly limitDefs = new Map<string, { limit: LimitMsg; scopeKey: string }>();
  private readonly byNode = new Map<string, Set<string>>();
  private readonly lastAlert = new Map<string, AlertMsg>();
  private readonly recent: Signal[] = [];

  constructor(
    private readonly sink: BoardSink,
    private readonly recentLimit = 500,
  ) {}

  apply(rec: BusRecord): ApplyOutcome {
    let obj: unknown;
    try {
      obj = JSON.parse(rec.value);
    } catch {
      return { ok: false, reason: `${rec.topic}: record is not valid JSON` };
    }
    if (rec.topic === TOPICS.exposures) return this.onExposure(obj);
    if (rec.topic === TOPICS.alerts) return this.onSignal(obj);
    if (rec.topic === TOPICS.limits) return this.onLimit(obj);
    return { ok: false, reason: `unexpected topic ${rec.topic}` };
  }

  private onExposure(obj: unknown): ApplyOutcome {
    const r = exposureSchema.safeParse(obj);
    if (!r.success)
      return {
        ok: false,
        reason: `exposure: ${r.error.issues[0]?.path.join('.')} ${r.error.issues[0]?.message}`,
      };
    const e = r.data as ExposureMsg;
    this.nodes.set(e.nodeKey, e);
    this.sink.publishExposure(e);
    for (const id of this.byNode.get(e.nodeKey) ?? []) this.sink.publishLimit(this.view(id)!);
    return { ok: true };
  }

  private onSignal(obj: unknown): ApplyOutcome {
    const type = (obj as { type?: unknown } | null)?.type;
    if (type === 'stale-feed') {
      const r = staleFeedSchema.safeParse(obj);
      if (!r.success)
        return {
          ok: false,
          reason: `stale-feed: ${r.error.issues[0]?.path.join('.')} ${r.error.issues[0]?.message}`,
        };
      this.remember(r.data);
      this.sink.publishAlert(r.data);
      return { ok: true };
    }
    const r = alertSchema.safeParse(obj);
    if (!r.success)
      return {
        ok: false,
        reason: `alert: ${r.error.issues[0]?.path.join('.')} ${r.error.issues[0]?.message}`,
      };
    const a = r.data as AlertMsg;
    this.lastAlert.set(a.limitId, a);
    this.remember(a);
    this.sink.publishAlert(a);
    const v = this.view(a.limitId);
    if (v) this.sink.publishLimit(v);
    return { ok: true };
  }

  private onLimit(obj: unknown): ApplyOutcome {
    const r = validateInput(obj);
    if (!r.ok) return { ok: false, reason: r.reason };
    const msg = r.msg;
    if (msg.type === 'limit') {
      this.dropLimit(msg.limitId);
      const scopeKey = nodeKey(msg.scope);
      this.limitDefs.set(msg.limitId, { limit: msg, scopeKey });
      let set = this.byNode.get(scopeKey);
      if (!set) this.byNode.set(scopeKey, (set = new Set()));
      set.add(msg.limitId);
      this.sink.publishLimit(this.view(msg.limitId)!);
      return { ok: true };
    }
    if (msg.type === 'limit-remove') {
      this.dropLimit(msg.limitId);
      return { ok: true };
    }
    return { ok: false, reason: `limits topic carries ${msg.type}, expected limit or limit-remove` };
  }

  private dropLimit(limitId: string): void {
    const old = this.limitDefs.get(limitId);
    if (!old) return;
    this.limitDefs.delete(limitId);
    this.byNode.get(old.scopeKey)?.delete(limitId);
  }

  private remember(s: Signal): void {
    this.recent.push(s);
    if (this.recent.length > this.recentLimit) this.recent.splice(0, this.recent.length - this.recentLimit);
  }

  /** A limit's bar: bounds from its definition, value from its node, level from its latest alert. */
  view(limitId: string): LimitView | undefined {
    const def = this.limitDefs.get(limitId);
    if (!def) return undefined;
    const { limit, scopeKey } = def;
    const node = this.nodes.get(scopeKey);
    const raw = node?.[limit.metric];
    const value = typeof raw === 'number' ? raw : 0;
    const last = this.lastAlert.get(limitId);
    return {
      limitId,
      nodeKey: scopeKey,
      metric: limit.metric,
      ...(limit.max !== undefined ? { max: limit.max } : {}),
      ...(limit.min !== undefined ? { min: limit.min } : {}),
      warnAt: limit.warnAt,
      hysteresis: limit.hysteresis,
      value,
      utilization: utilizationOf(value, limit.max, limit.min),
      level: last?.severity ?? 'ok',
    };
  }

  exposures(): ExposureMsg[] {
    return [...this.nodes.values()].sort((a, b) =>
      a.nodeKey < b.nodeKey ? -1 : a.nodeKey > b.nodeKey ? 1 : 0,
    );
  }

  limits(): LimitView[] {
    return [...this.limitDefs.keys()].sort().map((id) => this.view(id)!);
  }

  openAlerts(): AlertMsg[] {
    return [...this.lastAlert.values()]
      .filter((a) => a.severity !== 'ok')
      .sort((a, b) => (a.limitId < b.limitId ? -1 : 1));
  }

  recentSignals(): Signal[] {
    return [...this.recent];
  }
}

function parse(argv: string[]) {
  const { values } = parseArgs({
    args: argv,
    options: {
      brokers: { type: 'string' },
      port: { type: 'string' },
      host: { type: 'string' },
      token: { type: 'string' },
      'group-id': { type: 'string' },
      'topic-prefix': { type: 'string' },
      'recent-alerts': { type: 'string' },
      duration: { type: 'string' },
      'log-level': { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
    strict: true,
    allowPositionals: false,
  });
  const num = (name: string, raw: string | undefined, fallback: number, rule: NumberRule): number =>
    numberOption(name, raw, rule) ?? fallback;
  return {
    help: values.help === true,
    brokers: values.brokers ?? process.env.KAFKA_BROKERS,
    port: num('port', values.port, 9410, { min: 0, integer: true }),
    host: values.host ?? '127.0.0.1',
    token: values.token ?? process.env.KEELSON_HTTP_TOKEN,
    groupId: values['group-id'] ?? `keelson-board-${hostname()}-${process.pid}`,
    topicPrefix: values['topic-prefix'],
    recentAlerts: num('recent-alerts', values['recent-alerts'], 500, { min: 0, strict: true, integer: true }),
    durationMs:
      values.duration === undefined
        ? undefined
        : num('duration', values.duration, 0, { min: 0, strict: true }) * 1000,
    logLevel: values['log-level'] ?? 'info',
  };
}

export async function run(argv: string[], io: CommandIo): Promise<number> {
  let opts: ReturnType<typeof parse>;
  try {
    opts = parse(argv);
  } catch (err) {
    io.stderr.write(`keelson board: ${(err as Error).message}\n\n${HELP}`);
    return 1;
  }
  if (opts.help) {
    io.stdout.write(HELP);
    return 0;
  }
  if (!opts.brokers) {
    io.stderr.write(
      `keelson board: no brokers: pass --brokers host:port or set KAFKA_BROKERS\n(the embedded 'keelson run' serves the same page itself)\n`,
    );
    return 1;
  }

  const busMod = (await import('@keelson/bus')) as Record<string, unknown>;
  const KafkaBus = busMod.KafkaBus as
    | (new (o: Record<string, unknown>) => import('@keelson/bus').Bus & {
        connected: boolean;
        status(): unknown;
        subscribe(
          topics: string[],
          h: (b: BusRecord[]) => Promise<void>,
          o?: { groupId?: string; fromBeginning?: boolean },
        ): Promise<void>;
      })
    | undefined;
  if (typeof KafkaBus !== 'function') {
    io.stderr.write(
      'keelson board: this build has no Kafka transport (@keelson/bus does not export KafkaBus)\n',
    );
    return 1;
  }
  const [{ SseHub, startHttpServer }, { serveBoard }, { createLogger }, promClient] = await Promise.all([
    import('@keelson/http'),
    import('@keelson/board'),
    import('@keelson/runtime'),
    import('prom-client'),
  ]);
  const log = (await createLogger({ level: opts.logLevel })).child({ component: 'board' });

  const registry = new promClient.Registry();
  const records = new promClient.Counter({
    name: 'keelson_board_records_total',
    help: 'Records the board consumed, by logical topic and outcome (applied, invalid).',
    labelNames: ['topic', 'outcome'] as const,
    registers: [registry],
  });
  const hub: SseHubType = new SseHub({ recentAlerts: opts.recentAlerts });
  const state = new BoardState(hub, opts.recentAlerts);
  new promClient.Gauge({
    name: 'keelson_board_sse_clients',
    help: 'Browsers connected to /events.',
    registers: [registry],
    collect() {
      this.set(hub.stats().clients);
    },
  });
  new promClient.Gauge({
    name: 'keelson_board_nodes',
    help: 'Aggregation nodes the board holds (latest exposure each).',
    registers: [registry],
    collect() {
      this.set(state.exposures().length);
    },
  });
  let lastRecordAt = 0;
  hub.setSnapshot(() => ({
    exposures: state.exposures(),
    alerts: state.recentSignals(),
    limits: state.limits(),
  }));

  const bus = new KafkaBus({
    brokers: opts.brokers,
    groupId: opts.groupId,
    clientId: 'keelson-board',
    fromBeginning: true,
    ...(opts.topicPrefix !== undefined ? { topicPrefix: opts.topicPrefix } : {}),
    logger: log,
  });
  let subscribed = false;
  const http = await startHttpServer({
    host: opts.host,
    port: opts.port,
    ...(opts.token ? { token: opts.token } : {}),
    metrics: { text: () => registry.metrics(), contentType: registry.contentType },
    exposures: () => state.exposures(),
    alerts: () => ({ open: state.openAlerts(), recent: state.recentSignals() }),
    readiness: () => ({
      kafka: {
        ok: subscribed && bus.connected,
        detail: subscribed ? (bus.connected ? 'consuming' : 'not connected') : 'subscribing',
      },
    }),
    events: hub,
    board: serveBoard,
    onError: (err, path) => log.error({ err, path }, 'http handler failed'),
  });
  log.info({ url: http.url, groupId: opts.groupId, guarded: Boolean(opts.token) }, 'board listening');
  io.stdout.write(`keelson board: ${http.url}/ (Kafka ${opts.brokers})\n`);

  let stop!: (code: number) => void;
  const stopped = new Promise<number>((resolve) => (stop = resolve));
  const onSignal = (): void => stop(0);
  process.once('SIGINT', onSignal);
  process.once('SIGTERM', onSignal);
  const timer = opts.durationMs === undefined ? undefined : setTimeout(() => stop(0), opts.durationMs);

  let invalidLogged = 0;
  try {
    await bus.subscribe(
      [TOPICS.exposures, TOPICS.alerts, TOPICS.limits],
      async (batch) => {
        for (const rec of batch) {
          const r = state.apply(rec);
          records.inc({ topic: rec.topic, outcome: r.ok ? 'applied' : 'invalid' });
          // Log the first few in full and then only every thousandth: a poisoned topic must not flood the log.
          if (!r.ok && (invalidLogged++ < 20 || invalidLogged % 1000 === 0)) {
            log.warn(
              { topic: rec.topic, partition: rec.partition, offset: rec.offset, reason: r.reason },
              'record skipped',
            );
          }
        }
        lastRecordAt = Date.now();
      },
      { groupId: opts.groupId, fromBeginning: true },
    );
    subscribed = true;
  } catch (err) {
    log.error({ err }, 'could not subscribe to the Kafka topics');
    io.stderr.write(`keelson board: could not subscribe: ${(err as Error).message}\n`);
    stop(1);
  }

  const code = await stopped;
  if (timer) clearTimeout(timer);
  process.off('SIGINT', onSignal);
  process.off('SIGTERM', onSignal);
  hub.close();
  await http.close();
  await bus.close();
  log.info({ lastRecordAgoMs: lastRecordAt ? Date.now() - lastRecordAt : null }, 'board stopped');
  return code;
}
