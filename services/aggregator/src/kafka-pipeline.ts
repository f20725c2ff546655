// `keelson run --brokers ...`: the risk pipeline on Kafka, in one of three roles.
//
//  all        one engine over every input partition, publishing exposures and alerts itself (one
//             instance per group: it checks that it owns every partition and is not ready if not);
//  engine     scale-out: one engine per owned input partition (keyed inputs are co-partitioned by
//             underlying), each publishing its partial node sums to `partials`, keyed nodeKey|partition
//             and partitioned by nodeKey; stale-feed events and dead letters go out directly;
//  aggregate  sums the latest partial of every source partition per node, publishes the exposures
//             and checks the limits.
//
// Every consumer rebuilds on assignment (KafkaBus `rebuild`): it reads its partitions again from
// the start (trades in full, market data compacted to the latest per key), publishes nothing from
// what it had already handled, and goes live only once all its partitions and the whole curves and
// limits topics are read. Offsets are committed after the outputs a batch caused are acknowledged.
import { parseArgs } from 'node:util';
import { randomBytes } from 'node:crypto';
import { RiskEngine, WallClock, restoreLimitLevels } from '@keelson/engine';
import type { NodePartial } from '@keelson/engine';
import { KafkaBus, javaPartition, startLagReporter } from '@keelson/bus';
import type { BatchContext, BusRecord, KafkaBusLogger } from '@keelson/bus';
import { EngineRunner, AlertLog, createLogger, originOf, planBatch } from '@keelson/runtime';
import type { Published, RunnerEngine } from '@keelson/runtime';
import { KeelsonMetrics, SseHub, startHttpServer } from '@keelson/http';
import type { ReadinessCheck, RunningHttpServer } from '@keelson/http';
import { TOPICS } from '@keelson/shared-types';
import type { AlertMsg, ExposureMsg, RejectedMsg, StaleFeedMsg } from '@keelson/shared-types';
import { PartialsAggregator, decodePartial, partialKey } from './aggregator.ts';
import type { PartialWire } from './aggregator.ts';

export interface PipelineIo {
  stdout: NodeJS.WritableStream;
  stderr: NodeJS.WritableStream;
}

const HELP = `usage: keelson run --brokers HOST:PORT[,...] [options]

Runs the risk pipeline on Kafka (topics made by 'keelson topics').

options:
  --brokers LIST             bootstrap brokers (default: KAFKA_BROKERS)
  --role all|engine|aggregate
                             all (default): one instance does everything; engine + aggregate: scale out
  --clock wall|event         valuation time: the wall clock (default), or the largest input ts seen
  --topic-prefix P           (default: KAFKA_TOPIC_PREFIX, else 'keelson.')
  --group G                  consumer group (default keelson-engine, keelson-aggregate for aggregate)
  --instance-id ID           names this instance in client ids (default: random)
  --publish-interval MS      exposures coalesced per node over this interval (default 100)
  --decay-interval SECONDS   revalue the whole book this often (default 60 wall, 1 event; 0 = never)
  --stale-after SECONDS      (default 5)
  --reporting-currency CCY   (default USD)
  --port N / --host ADDR     HTTP (default 127.0.0.1:9400; 0 picks a free port)
  --token T                  bearer token for the data endpoints (default KEELSON_HTTP_TOKEN)
  --open-metrics             leave /metrics open when a token is set
  --max-ready-lag N          not ready while any owned partition lags more messages (default 10000)
  --lag-interval SECONDS     how often consumer lag is measured (default 5)
  --duration SECONDS         stop by itself after this long
  --log-level LEVEL          (default info)
  -h, --help
TLS and SASL: KAFKA_SSL*, KAFKA_SASL_* in the environment (see deploy/local-kafka/README.md).
`;

type Role = 'all' | 'engine' | 'aggregate';

interface Args {
  brokers: string;
  role: Role;
  clock: 'wall' | 'event';
  topicPrefix?: string;
  group: string;
  instanceId: string;
  publishIntervalMs: number;
  decayIntervalMs: number;
  staleAfterMs: number;
  reportingCurrency: string;
  port: number;
  host: string;
  token?: string;
  guardMetrics: boolean;
  durationMs?: number;
  logLevel: string;
  maxReadyLag: number;
  lagIntervalMs: number;
}

class UsageError extends Error {}

function num(name: string, raw: string | undefined, fallback: number, min: number): number {
  if (raw === undefined) return fallback;
  const n = Number(raw);
  if (!Number.isFinite(n) || n < min)
    throw new UsageError(`--${name} must be a number >= ${min}, got '${raw}'`);
  return n;
}

function parse(argv: string[], brokers: string): Args | 'help' {
  const { values } = parseArgs({
    args: argv,
    strict: true,
    allowPositionals: false,
    options: {
      brokers: { type: 'string' },
      role: { type: 'string' },
      clock: { type: 'string' },
      'topic-prefix': { type: 'string' },
      group: { type: 'string' },
      'instance-id': { type: 'string' },
      'publish-interval': { type: 'string' },
      'decay-interval': { type: 'string' },
      'stale-after': { type: 'string' },
      'reporting-currency': { type: 'string' },
      port: { type: 'string' },
      host: { type: 'string' },
      token: { type: 'string' },
      'open-metrics': { type: 'boolean' },
      duration: { type: 'string' },
      'max-ready-lag': { type: 'string' },
      'lag-interval': { type: 'string' },
      'log-level': { type: 'string' },
      quiet: { type: 'boolean' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) return 'help';
  const role = (values.role ?? 'all') as Role;
  if (!['all', 'engine', 'aggregate'].includes(role))
    throw new UsageError(`--role must be all, engine or aggregate, got '${values.role}'`);
  const clock = (values.clock ?? 'wall') as 'wall' | 'event';
  if (clock !== 'wall' && clock !== 'event')
    throw new UsageError(`--clock must be wall or event, got '${values.clock}'`);
  const token = values.token ?? process.env.KEELSON_HTTP_TOKEN;
  const duration = values.duration === undefined ? undefined : num('duration', values.duration, 0, 0) * 1000;
  const ccy = values['reporting-currency'] ?? 'USD';
  if (!/^[A-Z]{3}$/.test(ccy))
    throw new UsageError(`--reporting-currency must be three upper-case letters, got '${ccy}'`);
  return {
    brokers: values.brokers ?? brokers,
    role,
    clock,
    ...(values['topic-prefix'] !== undefined ? { topicPrefix: values['topic-prefix'] } : {}),
    group: values.group ?? (role === 'aggregate' ? 'keelson-aggregate' : 'keelson-engine'),
    instanceId: values['instance-id'] ?? randomBytes(3).toString('hex'),
    publishIntervalMs: num('publish-interval', values['publish-interval'], 100, 0),
    decayIntervalMs: num('decay-interval', values['decay-interval'], clock === 'event' ? 1 : 60, 0) * 1000,
    staleAfterMs: num('stale-after', values['stale-after'], 5, 0) * 1000,
    reportingCurrency: ccy,
    port: num('port', values.port, 9400, 0),
    host: values.host ?? '127.0.0.1',
    ...(token ? { token } : {}),
    guardMetrics: !values['open-metrics'],
    ...(duration !== undefined ? { durationMs: duration } : {}),
    logLevel: values['log-level'] ?? 'info',
    maxReadyLag: num('max-ready-lag', values['max-ready-lag'], 10_000, 0),
    lagIntervalMs: Math.max(100, num('lag-interval', values['lag-interval'], 5, 0.1) * 1000),
  };
}

/** Tables every instance reads whole: few keys, replace-whole messages, compacted. */
const TABLE_TOPICS = [TOPICS.curves, TOPICS.limits];
/** Keyed inputs, co-partitioned by underlying: partition p of each belongs to one engine. */
const KEYED_TOPICS = [TOPICS.refdata, TOPICS.vols, TOPICS.spots, TOPICS.trades];

/** Latest raw record per (topic, key) of the table topics, in arrival order. */
class TableStore {
  private readonly rows = new Map<string, BusRecord>();
  put(r: BusRecord): void {
    const k = `${r.topic}\u0000${r.key ?? ''}`;
    this.rows.delete(k);
    this.rows.set(k, r);
  }
  all(): BusRecord[] {
    // Market data before limits, so that a replayed limit is checked against priced nodes.
    const rank = (t: string) => (t === TOPICS.limits ? 1 : 0);
    return [...this.rows.values()].sort((a, b) => rank(a.topic) - rank(b.topic));
  }
}

/**
 * A spot of a pair that converts into the reporting currency (CCYREP or REPCCY): every partition's
 * engine needs it for its positions in CCY, wherever the pair's own partition is. Engines ignore a
 * tick older than the one they hold, so a pair's tick reaching its owner twice does no harm.
 */
function isConversionSpot(r: BusRecord, rep: string): boolean {
  const k = r.key;
  if (r.topic !== TOPICS.spots || !k || !/^[A-Z]{6}$/.test(k)) return false;
  return (k.slice(0, 3) === rep) !== (k.slice(3) === rep);
}

/** What risk control and operations were last told, per limit and per feed. */
interface LastTold {
  limits: Map<string, AlertMsg>;
  feeds: Map<string, 'raised' | 'cleared'>;
}

/**
 * The latest alert per limitId and the latest stale-feed state per underlying on the alerts topic,
 * read to its end. A rebuilt limit book continues from the former (restoreLimitLevels), so a
 * restart or rebalance neither raises an open episode again nor starts a new alertId for it; a
 * rebuilt engine announces the feeds whose state differs from the latter (reconcileFeeds). A
 * record that is not JSON is skipped (nothing of ours writes one).
 */
async function latestAlerts(bus: KafkaBus): Promise<LastTold> {
  const latest = new Map<string, AlertMsg>();
  const feeds = new Map<string, 'raised' | 'cleared'>();
  for (const r of await bus.readToEnd(TOPICS.alerts)) {
    let o: unknown;
    try {
      o = JSON.parse(r.value);
    } catch {
      continue;
    }
    const a = o as Partial<AlertMsg> | null;
    if (a?.type === 'alert' && typeof a.limitId === 'string' && typeof a.alertId === 'string')
      latest.set(a.limitId, a as AlertMsg);
    const f = o as Partial<StaleFeedMsg> | null;
    if (
      f?.type === 'stale-feed' &&
      typeof f.underlying === 'string' &&
      (f.state === 'raised' || f.state === 'cleared')
    )
      feeds.set(f.underlying, f.state);
  }
  return { limits: latest, feeds };
}

/** Applies records to an engine while rebuilding: state only, every output dropped. */
function restoreInto(engine: RiskEngine, records: BusRecord[]): void {
  const plan = planBatch([records]);
  for (let i = 0; i < records.length; i++) {
    if (plan.apply[i] === 0) continue;
    const r = records[i] as BusRecord;
    try {
      engine.ingest(r.value, originOf(r), plan.decoded(i, r.value));
    } catch {
      // Already dead-lettered when it was first handled; a rebuild must not stop on it.
    }
  }
  engine.drain();
}

/**
 * A partition's engine as the EngineRunner sees it: its "exposures" are the partition's partials,
 * keyed nodeKey|partition, and limit alerts stay inside (limits are judged on the whole node, by
 * the aggregate stage); stale-feed events and dead letters pass through.
 */
class PartitionEngine implements RunnerEngine {
  constructor(
    readonly engine: RiskEngine,
    readonly partition: number,
    /** Whether this partition owns an underlying's feed (conversion pairs reach every engine). */
    private readonly owns: (underlying: string) => boolean,
  ) {}
  ingest(raw: string, source: string) {
    return this.engine.ingest(raw, source);
  }
  revalueAll(): void {
    this.engine.revalueAll();
  }
  private carry(p: NodePartial): ExposureMsg {
    const wire: PartialWire = {
      type: 'partial',
      key: partialKey(p.nodeKey, this.partition),
      sourcePartition: this.partition,
      partial: p,
    };
    // The runner coalesces by nodeKey and reads node.underlying for latency; the value sent is the
    // wire. It may also take it for a node source (`type` is not 'exposure'), read at flush time
    // through key, underlying, json() and exposure(): the carried partial answers both ways.
    const json = JSON.stringify(wire);
    const carried = {
      ...wire,
      nodeKey: wire.key,
      node: p.node,
      underlying: p.node.underlying,
      toJSON: () => wire,
      json: () => json,
      exposure: () => carried,
    };
    return carried as unknown as ExposureMsg;
  }
  drain() {
    const d = this.engine.drainPartials();
    return {
      exposures: d.partials.map((p) => this.carry(p)),
      // One voice per feed: the engine of the partition the feed's key lands on.
      alerts: d.alerts.filter((a): a is StaleFeedMsg => a.type === 'stale-feed' && this.owns(a.underlying)),
      rejected: d.rejected,
    };
  }
  snapshot(): ExposureMsg[] {
    return this.engine.partials().map((p) => this.carry(p));
  }
}

export async function runKafkaPipeline(opts: {
  argv: string[];
  io: PipelineIo;
  brokers: string;
}): Promise<number> {
  let args: Args | 'help';
  try {
    args = parse(opts.argv, opts.brokers);
  } catch (e) {
    opts.io.stderr.write(`keelson run: ${(e as Error).message}\n\n${HELP}`);
    return 1;
  }
  if (args === 'help') {
    opts.io.stdout.write(HELP);
    return 0;
  }
  const a = args;
  const log = await createLogger({ level: a.logLevel, stream: opts.io.stderr });
  const busLog: KafkaBusLogger = {
    debug: (o, m) => log.debug(o, m),
    info: (o, m) => log.info(o, m),
    warn: (o, m) => log.warn(o, m),
    error: (o, m) => log.error(o, m),
  };

  let bus: KafkaBus;
  try {
    bus = new KafkaBus({
      brokers: a.brokers,
      ...(a.topicPrefix !== undefined ? { topicPrefix: a.topicPrefix } : {}),
      groupId: a.group,
      clientId: `keelson-${a.role}-${a.instanceId}`,
      logger: busLog,
      // Batches of all owned partitions wait for the same exposure flush together, not in turn.
      partitionsConsumedConcurrently: 64,
    });
  } catch (e) {
    opts.io.stderr.write(`keelson run: ${(e as Error).message}\n`);
    return 1;
  }

  const metrics = new KeelsonMetrics();
  const alertLog = new AlertLog(500);
  const sse = new SseHub({ now: () => Date.now() });
  const checks: Record<string, ReadinessCheck> = {
    busConnected: { ok: false, detail: 'connecting' },
    stateRebuilt: { ok: false, detail: 'waiting for a partition assignment' },
    consumerLag: { ok: false, detail: 'not measured yet' },
  };
  const onPublished = (p: Published) => {
    for (const x of p.alerts) {
      alertLog.add(x);
      sse.publishAlert(x);
      if (x.type === 'alert')
        log.info(
          { limitId: x.limitId, nodeKey: x.nodeKey, severity: x.severity, state: x.state },
          'limit alert',
        );
      else log.warn({ underlying: x.underlying, state: x.state }, 'feed staleness');
    }
    for (const r of p.rejected) log.warn({ source: r.source, reason: r.reason }, 'input rejected');
    if (a.role !== 'engine') for (const e of p.exposures) sse.publishExposure(e);
  };
  const onError = (err: unknown, context: string) => log.error({ err, context }, 'pipeline fault');
  const newEngine = () =>
    new RiskEngine({
      clock: a.clock === 'event' ? 'event' : new WallClock(),
      observer: metrics.observer,
      reportingCurrency: a.reportingCurrency,
      staleAfterMs: a.staleAfterMs,
    });
  const runnerFor = (
    engine: RunnerEngine,
    outputs?: { exposures: string; alerts: string; rejected: string },
  ) => {
    const r = new EngineRunner({
      engine,
      bus: outputs ? partialsBus(bus) : bus,
      metrics,
      observer: metrics.observer,
      publishIntervalMs: a.publishIntervalMs,
      onPublished,
      onError,
      ...(outputs ? { outputTopics: outputs } : {}),
    });
    r.recordLatency = false;
    return r;
  };

  const stopFns: (() => Promise<void>)[] = [];
  let snapshot: () => ExposureMsg[] = () => [];
  let openAlerts: () => AlertMsg[] = () => [];

  try {
    if (a.role === 'all') {
      let engine = newEngine();
      let runner = runnerFor(engine);
      let owned = 0;
      let published: Promise<LastTold> = Promise.resolve({ limits: new Map(), feeds: new Map() });
      snapshot = () => engine.snapshot();
      openAlerts = () => engine.openAlerts();
      metrics.bindEngine(engine);
      const decay = startDecay(a, () => ({ engine, runner }), onError);
      stopFns.push(async () => {
        clearInterval(decay);
        await runner.stop();
      });
      await bus.subscribe(
        [...TABLE_TOPICS, ...KEYED_TOPICS],
        async (batch: BusRecord[], ctx: BatchContext) => {
          if (ctx.restoring) return restoreInto(engine, batch);
          // Committed once its exposures are acknowledged; the next batch is fetched meanwhile.
          return runner.handleUntilAcked(batch);
        },
        {
          rebuild: true,
          onPhase: (e) => {
            if (e.phase === 'restoring') {
              // The previous generation's last flush may still carry alerts: the topic is read
              // after it is acknowledged (while the partitions rebuild; awaited before going live).
              const stopped = runner
                .stop()
                .catch((err: unknown) => onError(err, 'stopping the previous generation'));
              engine = newEngine();
              runner = runnerFor(engine);
              metrics.bindEngine(engine);
              owned = e.assignment.reduce((n, x) => n + x.partitions.length, 0);
              published = stopped.then(() => latestAlerts(bus));
              published.catch(() => undefined);
              checks.stateRebuilt = { ok: false, detail: `rebuilding ${owned} partitions from the topics` };
              metrics.setReady(false);
              log.info(
                { generation: e.generation, assignment: e.assignment },
                'partitions assigned; rebuilding',
              );
            }
          },
          beforeLive: async () => {
            const told = await published;
            const restored = restoreLimitLevels(engine, told.limits.values());
            log.info({ limits: restored.length }, 'limit levels continue from the alerts topic');
            const gaps = engine.reconcileFeeds(told.feeds);
            if (gaps.length) log.info({ feeds: gaps.length }, 'feed states that changed while down');
            let total = 0;
            for (const t of [...TABLE_TOPICS, ...KEYED_TOPICS]) total += await bus.partitionCount(t);
            await runner.publishSnapshot();
            await runner.handle([]); // the feed announcements, if any
            runner.recordLatency = true;
            if (owned < total) {
              checks.stateRebuilt = {
                ok: false,
                detail: `role all owns ${owned} of ${total} input partitions: another instance shares group ${a.group}; scale out with --role engine and --role aggregate`,
              };
              log.error({ owned, total, group: a.group }, 'role all does not own every partition');
            } else {
              checks.stateRebuilt = { ok: true, detail: `rebuilt; ${engine.stats().positions} positions` };
              metrics.setReady(true);
            }
            log.info({ positions: engine.stats().positions }, 'rebuilt from the topics; live');
          },
        },
      );
    } else if (a.role === 'engine') {
      const tables = new TableStore();
      const engines = new Map<number, { pe: PartitionEngine; runner: EngineRunner }>();
      let previous: Promise<unknown> = Promise.resolve();
      let live = false;
      let tablesLive!: () => void;
      const tablesReady = new Promise<void>((r) => (tablesLive = r));
      snapshot = () => [];
      openAlerts = () => [];
      metrics.bindEngine({
        stats: () => {
          let positions = 0;
          for (const { pe } of engines.values()) positions += pe.engine.stats().positions;
          return { positions, unpriced: {} };
        },
        feeds: () => [...engines.values()].flatMap(({ pe }) => pe.engine.feeds()),
        openAlerts: () => [],
      });
      const spotPartitions = await bus.partitionCount(TOPICS.spots);
      const owns = (p: number) => (underlying: string) => javaPartition(underlying, spotPartitions) === p;
      await bus.subscribe(
        [...TABLE_TOPICS, TOPICS.spots],
        async (all, ctx) => {
          const batch = all.filter(
            (r) => r.topic !== TOPICS.spots || isConversionSpot(r, a.reportingCurrency),
          );
          if (batch.length === 0) return;
          for (const r of batch) tables.put(r);
          if (ctx.restoring || !live) {
            for (const { pe } of engines.values()) restoreInto(pe.engine, batch);
            return;
          }
          await Promise.all([...engines.values()].map(({ runner }) => runner.handle(batch)));
        },
        {
          groupId: `${a.group}.tables.${a.instanceId}.${randomBytes(3).toString('hex')}`,
          commit: false,
          rebuild: true,
          onPhase: (e) => e.phase === 'live' && tablesLive(),
        },
      );
      const decay = startDecayMany(
        a,
        () => [...engines.values()].map(({ pe, runner }) => ({ engine: pe.engine, runner })),
        onError,
      );
      stopFns.push(async () => {
        clearInterval(decay);
        await Promise.all([...engines.values()].map(({ runner }) => runner.stop()));
      });
      await bus.subscribe(
        KEYED_TOPICS,
        async (batch, ctx) => {
          const p = batch[0]?.partition ?? -1;
          const e = engines.get(p);
          if (!e) throw new Error(`a batch of partition ${p}, which this instance does not own`);
          if (ctx.restoring) return restoreInto(e.pe.engine, batch);
          return e.runner.handleUntilAcked(batch);
        },
        {
          rebuild: true,
          onPhase: (e) => {
            if (e.phase !== 'restoring') return;
            live = false;
            previous = Promise.all(
              [...engines.values()].map(({ runner }) =>
                runner.stop().catch((err: unknown) => onError(err, 'stopping the previous generation')),
              ),
            );
            engines.clear();
            const parts = new Set(e.assignment.flatMap((x) => x.partitions));
            for (const p of parts) {
              const pe = new PartitionEngine(newEngine(), p, owns(p));
              restoreInto(pe.engine, tables.all());
              engines.set(p, {
                pe,
                runner: runnerFor(pe, {
                  exposures: TOPICS.partials,
                  alerts: TOPICS.alerts,
                  rejected: TOPICS.rejected,
                }),
              });
            }
            checks.stateRebuilt = {
              ok: false,
              detail: `rebuilding input partitions ${[...parts].sort((x, y) => x - y).join(',') || '(none)'}`,
            };
            metrics.setReady(false);
            log.info({ generation: e.generation, partitions: [...parts] }, 'partitions assigned; rebuilding');
          },
          beforeLive: async () => {
            await tablesReady;
            // Read last, after this process's previous generation has flushed: what another
            // instance that owned these partitions said before the rebalance is on the topic by
            // now, short of a flush still in flight there.
            await previous;
            const { feeds } = await latestAlerts(bus);
            await Promise.all(
              [...engines.values()].map(async ({ pe, runner }) => {
                // each partition's engine announces only the feeds it owns (PartitionEngine.drain)
                pe.engine.reconcileFeeds(feeds);
                await runner.publishSnapshot();
                await runner.handle([]);
                runner.recordLatency = true;
              }),
            );
            live = true;
            checks.stateRebuilt = {
              ok: true,
              detail: `live on input partitions ${[...engines.keys()].sort((x, y) => x - y).join(',') || '(none)'}`,
            };
            metrics.setReady(true);
            log.info({ partitions: [...engines.keys()] }, 'rebuilt from the topics; live');
          },
        },
      );
    } else {
      let agg = new PartialsAggregator();
      let published: Promise<LastTold> = Promise.resolve({ limits: new Map(), feeds: new Map() });
      const limitRows = new TableStore();
      let live = false;
      let limitsLive!: () => void;
      const limitsReady = new Promise<void>((r) => (limitsLive = r));
      const out = new AggregateOutput(bus, a.publishIntervalMs, onPublished);
      snapshot = () => agg.snapshot();
      openAlerts = () => agg.openAlerts();
      metrics.bindEngine({
        stats: () => ({
          positions: agg.snapshot().find((e) => e.nodeKey === 'firm')?.positions ?? 0,
          unpriced: {},
        }),
        feeds: () => [],
        openAlerts: () => agg.openAlerts(),
        utilizations: () => agg.utilizations(),
      });
      stopFns.push(() => out.stop());
      await bus.subscribe(
        [TOPICS.limits],
        async (batch, ctx) => {
          for (const r of batch) {
            limitRows.put(r);
            agg.applyLimit(r.value);
          }
          if (ctx.restoring || !live) {
            agg.drain();
            return;
          }
          await out.emit(agg.drain());
        },
        {
          groupId: `${a.group}.limits.${a.instanceId}.${randomBytes(3).toString('hex')}`,
          commit: false,
          rebuild: true,
          onPhase: (e) => e.phase === 'live' && limitsLive(),
        },
      );
      await bus.subscribe(
        [TOPICS.partials],
        async (batch, ctx) => {
          for (const r of batch) {
            const d = decodePartial(r.value);
            if (d.ok) agg.applyPartial(d.wire);
            else if (!ctx.restoring) log.error({ source: originOf(r), reason: d.reason }, 'not a partial');
          }
          if (ctx.restoring) {
            agg.drain();
            return;
          }
          return out.emit(agg.drain());
        },
        {
          rebuild: true,
          onPhase: (e) => {
            if (e.phase !== 'restoring') return;
            live = false;
            agg = new PartialsAggregator();
            published = latestAlerts(bus);
            published.catch(() => undefined);
            for (const r of limitRows.all()) agg.applyLimit(r.value);
            agg.drain();
            checks.stateRebuilt = { ok: false, detail: 'rebuilding partials' };
            metrics.setReady(false);
            log.info(
              { generation: e.generation, assignment: e.assignment },
              'partials partitions assigned; rebuilding',
            );
          },
          beforeLive: async () => {
            await limitsReady;
            // Limits that arrived while rebuilding were applied then; the published levels win.
            const restored = agg.restoreLevels((await published).limits.values());
            log.info({ limits: restored.length }, 'limit levels continue from the alerts topic');
            agg.touchAll();
            live = true;
            await (
              await out.emit(agg.drain())
            ).outputsAcked;
            checks.stateRebuilt = { ok: true, detail: 'rebuilt; summing partials' };
            metrics.setReady(true);
            log.info({ nodes: agg.snapshot().length }, 'rebuilt from the partials; live');
          },
        },
      );
    }
  } catch (e) {
    log.error({ err: e }, 'could not start on Kafka');
    await bus.close();
    return 1;
  }

  const judgeLag = (m: number | undefined) => {
    checks.consumerLag =
      m === undefined
        ? { ok: false, detail: 'not measured yet' }
        : {
            ok: m <= a.maxReadyLag,
            detail: `largest partition lag ${m} messages (ready at most ${a.maxReadyLag})`,
          };
    // keelson_ready follows the rebuild; a backlog over the threshold also holds it at 0.
    if (checks.stateRebuilt?.ok) metrics.setReady(checks.consumerLag.ok);
  };
  const lag = startLagReporter(
    bus,
    metrics,
    a.lagIntervalMs,
    (err) => log.warn({ err: (err as Error).message }, 'consumer lag not measured'),
    judgeLag,
  );
  void lag.refresh();
  stopFns.push(async () => lag.stop());

  let http: RunningHttpServer;
  try {
    sse.setSnapshot(() => ({ exposures: snapshot(), alerts: alertLog.recent(), limits: [] }));
    http = await startHttpServer({
      host: a.host,
      port: a.port,
      ...(a.token ? { token: a.token } : {}),
      guardMetrics: a.guardMetrics,
      metrics,
      exposures: () => snapshot(),
      alerts: () => ({ open: openAlerts(), recent: alertLog.recent() }),
      readiness: () => {
        const st = bus.status();
        checks.busConnected = {
          ok: st.connected,
          detail: st.connected
            ? `connected to ${bus.connection.brokers.join(',')}`
            : `not connected: ${st.producer.lastError ?? st.consumers.find((c) => c.lastError)?.lastError ?? st.consumers.map((c) => `${c.groupId} ${c.state}`).join(', ')}`,
        };
        return { ...checks };
      },
      events: sse,
      now: () => Date.now(),
      onError: (err, path) => log.error({ err, path }, 'http handler failed'),
    });
  } catch (e) {
    log.error({ err: e }, 'http server did not start');
    await bus.close();
    return 1;
  }
  log.info(
    { url: http.url, role: a.role, group: a.group, clock: a.clock, prefix: bus.topicPrefix },
    'running on kafka',
  );

  const bounded = (work: Promise<unknown>, ms: number, what: string): Promise<unknown> =>
    Promise.race([
      work,
      new Promise((r) =>
        setTimeout(() => {
          log.warn({ what, ms }, 'shutdown step did not finish in time; going on');
          r(undefined);
        }, ms).unref(),
      ),
    ]);
  return await new Promise<number>((resolve) => {
    let stopping = false;
    const stop = async (why: string) => {
      if (stopping) return;
      stopping = true;
      log.info({ why }, 'stopping');
      for (const f of stopFns) await f().catch((err: unknown) => onError(err, 'stop'));
      // The last flush is out and its commits were given their chance inside close(); leaving the
      // group must not keep a stopped service from exiting (the broker's session timeout covers it).
      await bounded(
        bus.close().catch((err: unknown) => onError(err, 'bus close')),
        20_000,
        'leaving the broker',
      );
      await bounded(
        http.close().catch(() => undefined),
        5_000,
        'closing the HTTP server',
      );
      log.info({ why }, 'stopped');
      process.off('SIGINT', onSig);
      process.off('SIGTERM', onSig);
      resolve(0);
    };
    const onSig = (sig: NodeJS.Signals) => void stop(sig);
    process.on('SIGINT', onSig);
    process.on('SIGTERM', onSig);
    if (a.durationMs !== undefined) setTimeout(() => void stop('duration reached'), a.durationMs);
  });
}

/**
 * Revalues the book on a timer. In event-clock mode only when the event clock moved: after a feed
 * goes quiet the book is then valued once more at the last event time, as a replay's end is.
 */
function startDecay(
  a: Args,
  current: () => { engine: RiskEngine; runner: EngineRunner },
  onError: (e: unknown, c: string) => void,
) {
  return startDecayMany(a, () => [current()], onError);
}

function startDecayMany(
  a: Args,
  all: () => { engine: RiskEngine; runner: EngineRunner }[],
  onError: (e: unknown, c: string) => void,
) {
  const lastAt = new WeakMap<RiskEngine, number>();
  const timer = setInterval(
    () => {
      for (const { engine, runner } of all()) {
        if (a.clock === 'event' && lastAt.get(engine) === engine.now) continue;
        try {
          engine.revalueAll();
          lastAt.set(engine, engine.now);
          // An empty batch publishes what the revaluation changed, through the same path as inputs.
          runner.handle([]).catch((err: unknown) => onError(err, 'decay publish'));
        } catch (err) {
          onError(err, 'decay');
        }
      }
    },
    a.decayIntervalMs > 0 ? a.decayIntervalMs : 2 ** 31 - 1,
  );
  timer.unref();
  return timer;
}

/** The runner's view of the bus for an engine role: its "exposures" go to partials, by node. */
function partialsBus(bus: KafkaBus) {
  return {
    publish: (topic: string, records: { key: string | null; value: string }[]) =>
      topic === TOPICS.partials
        ? bus.publishPartitioned(
            topic,
            records.map((r) => ({
              ...r,
              partitionKey: (r.key ?? '').slice(0, (r.key ?? '').lastIndexOf('|')),
            })),
          )
        : bus.publish(topic, records),
    subscribe: () => Promise.reject(new Error('the partials bus only publishes')),
    close: () => Promise.resolve(),
  };
}

/**
 * The aggregate stage's outputs: alerts published at once and awaited; exposures coalesced per
 * node over the publish interval, acknowledged through `outputsAcked` (the batch is committed
 * after it; the handler does not wait for it). A failed flush keeps its exposures and retries.
 */
class AggregateOutput {
  private pending = new Map<string, ExposureMsg>();
  private timer: NodeJS.Timeout | null = null;
  private waiters: (() => void)[] = [];
  private chain: Promise<void> = Promise.resolve();
  private lastFlush = 0;

  constructor(
    private readonly bus: KafkaBus,
    private readonly intervalMs: number,
    private readonly onPublished: (p: Published) => void,
  ) {}

  async emit(o: { exposures: ExposureMsg[]; alerts: AlertMsg[] }): Promise<{ outputsAcked: Promise<void> }> {
    const work: Promise<void>[] = [];
    let outputsAcked: Promise<void> = Promise.resolve();
    if (o.alerts.length) {
      const alerts = o.alerts;
      work.push(
        this.enqueue(async () => {
          await this.bus.publish(
            TOPICS.alerts,
            alerts.map((x) => ({ key: x.limitId, value: JSON.stringify(x) })),
          );
          this.onPublished({ exposures: [], alerts, rejected: [] as RejectedMsg[] });
        }),
      );
    }
    if (o.exposures.length) {
      for (const e of o.exposures) {
        this.pending.delete(e.nodeKey);
        this.pending.set(e.nodeKey, e);
      }
    }
    if (this.pending.size) {
      outputsAcked = new Promise((resolve) => this.waiters.push(resolve));
      this.arm();
    }
    await Promise.all(work);
    return { outputsAcked };
  }

  private arm(): void {
    if (this.timer) return;
    const wait = Math.max(0, this.lastFlush + this.intervalMs - Date.now());
    this.timer = setTimeout(() => void this.enqueue(() => this.flush()).catch(() => undefined), wait);
  }

  private enqueue(fn: () => Promise<void>): Promise<void> {
    const run = this.chain.then(fn);
    this.chain = run.catch(() => undefined);
    return run;
  }

  private async flush(): Promise<void> {
    this.timer = null;
    const exposures = [...this.pending.values()];
    const waiters = this.waiters;
    this.pending = new Map();
    this.waiters = [];
    this.lastFlush = Date.now();
    try {
      if (exposures.length)
        await this.bus.publish(
          TOPICS.exposures,
          exposures.map((e) => ({ key: e.nodeKey, value: JSON.stringify(e) })),
        );
    } catch (e) {
      for (const x of exposures) if (!this.pending.has(x.nodeKey)) this.pending.set(x.nodeKey, x);
      this.waiters = waiters.concat(this.waiters);
      this.arm();
      throw e;
    }
    this.onPublished({ exposures, alerts: [], rejected: [] });
    for (const w of waiters) w();
  }

  async stop(): Promise<void> {
    if (this.timer) clearTimeout(this.timer);
    await this.enqueue(() => this.flush()).catch(() => undefined);
  }
}
