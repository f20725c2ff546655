// The embedded default of `keelson run`: everything in one process with no broker. The simulator
// feeds the in-process bus in real time, the same EngineRunner the Kafka mode uses consumes it, and
// the HTTP server shows the result (metrics, probes, JSON, live board).
import { RiskEngine, WallClock } from '@keelson/engine';
import { MarketSim } from '@keelson/sim';
import { MemoryBus } from '@keelson/bus';
import { KeelsonMetrics, SseHub, startHttpServer, type RunningHttpServer } from '@keelson/http';
import { serveBoard } from '@keelson/board';
import type { Logger } from 'pino';
import { AlertLog } from './alert-log.ts';
import { SimFeeder, type MarketSource } from './feeder.ts';
import { EngineRunner, type Published } from './runner.ts';
import { renderSummaryLine, SummaryPrinter, type SummarySample } from './summary.ts';

export interface EmbeddedOptions {
  host?: string;
  port?: number;
  token?: string;
  guardMetrics?: boolean;
  seed?: number;
  /** Market moves per wall time (the simulator's marketSpeed); timestamps stay wall time. Default 1. */
  speed?: number;
  /** Simulator size; the simulator's defaults when unset. */
  underlyings?: number;
  trades?: number;
  publishIntervalMs?: number;
  decayIntervalMs?: number;
  staleAfterMs?: number;
  reportingCurrency?: string;
  /** Wall ms between simulator steps; default 50. */
  stepMs?: number;
  logger: Logger;
  /** Where the live summary goes, and whether it is redrawn in place; omit to print none. */
  summary?: { out: NodeJS.WritableStream; tty: boolean; intervalMs?: number };
  /** Replace the simulator (tests). */
  source?: MarketSource;
  /** Market start time, epoch ms; default now. */
  startMs?: number;
}

export interface EmbeddedRuntime {
  url: string;
  port: number;
  engine: RiskEngine;
  runner: EngineRunner;
  bus: MemoryBus;
  /** The closing summary line. */
  finalLine(): string;
  stop(): Promise<void>;
}

export async function startEmbedded(opts: EmbeddedOptions): Promise<EmbeddedRuntime> {
  const log = opts.logger.child({ component: 'embedded' });
  const speed = opts.speed ?? 1;
  // Live mode values at the wall clock; the simulator stamps its ticks with the same clock.
  const clock = new WallClock();
  const startMs = opts.startMs ?? clock.now();
  const metrics = new KeelsonMetrics({ now: () => clock.now() });
  const engineOpts: ConstructorParameters<typeof RiskEngine>[0] = { clock, observer: metrics.observer };
  if (opts.reportingCurrency) engineOpts.reportingCurrency = opts.reportingCurrency;
  if (opts.staleAfterMs !== undefined) engineOpts.staleAfterMs = opts.staleAfterMs;
  const engine = new RiskEngine(engineOpts);
  metrics.bindEngine(engine);

  const checks = { busConnected: false, stateRebuilt: false, feedRunning: false };
  const bootstrap = { total: 0 };
  const alertLog = new AlertLog(500);
  const sse = new SseHub({ now: () => clock.now() });
  sse.setSnapshot(() => ({
    exposures: engine.snapshot(),
    alerts: alertLog.recent(),
    limits: engine.limits(),
  }));

  const bus = new MemoryBus({
    onHandlerError: (err) => log.error({ err }, 'a bus handler failed; its subscription stopped'),
  });
  const onPublished = (p: Published) => {
    for (const a of p.alerts) {
      alertLog.add(a);
      sse.publishAlert(a);
      if (a.type === 'alert')
        log.info(
          { limitId: a.limitId, nodeKey: a.nodeKey, severity: a.severity, state: a.state },
          'limit alert',
        );
      else log.warn({ underlying: a.underlying, state: a.state }, 'feed staleness');
    }
    for (const r of p.rejected) log.warn({ source: r.source, reason: r.reason }, 'input rejected');
    if (p.exposures.length) {
      for (const e of p.exposures) sse.publishExposure(e);
      const touched = new Set(p.exposures.map((e) => e.nodeKey));
      for (const v of engine.limits()) if (touched.has(v.nodeKey)) sse.publishLimit(v);
    }
  };
  const runner = new EngineRunner({
    engine,
    bus,
    metrics,
    observer: metrics.observer,
    publishIntervalMs: opts.publishIntervalMs ?? 100,
    decayIntervalMs: opts.decayIntervalMs ?? 60_000,
    onPublished,
    onError: (err, context) => log.error({ err, context }, 'runner fault'),
  });
  await runner.start();
  checks.busConnected = true;

  let http: RunningHttpServer;
  try {
    http = await startHttpServer({
      host: opts.host ?? '127.0.0.1',
      port: opts.port ?? 9400,
      ...(opts.token ? { token: opts.token } : {}),
      ...(opts.guardMetrics !== undefined ? { guardMetrics: opts.guardMetrics } : {}),
      metrics,
      exposures: () => engine.snapshot(),
      alerts: () => ({ open: engine.openAlerts(), recent: alertLog.recent() }),
      readiness: () => ({
        busConnected: { ok: checks.busConnected, detail: 'in-process bus' },
        stateRebuilt: {
          ok: checks.stateRebuilt,
          detail: checks.stateRebuilt
            ? `bootstrap of ${bootstrap.total} inputs applied`
            : 'applying the bootstrap',
        },
        feedRunning: {
          ok: checks.feedRunning,
          detail: checks.feedRunning ? 'simulator feeding' : 'simulator not started',
        },
      }),
      events: sse,
      board: serveBoard,
      now: () => Date.now(),
      onError: (err, path) => log.error({ err, path }, 'http handler failed'),
    });
  } catch (err) {
    await runner.stop();
    await bus.close();
    throw err;
  }
  log.info({ url: http.url, speed, guarded: Boolean(opts.token) }, 'http listening');

  const source =
    opts.source ??
    new MarketSim({
      seed: opts.seed ?? 1,
      startMs,
      marketSpeed: speed,
      ...(opts.underlyings !== undefined ? { underlyings: opts.underlyings } : {}),
      ...(opts.trades !== undefined ? { trades: opts.trades } : {}),
    });
  const feeder = new SimFeeder({
    source,
    bus,
    clock,
    stepMs: opts.stepMs ?? 50,
    onError: (err) => log.error({ err }, 'simulator step failed'),
  });
  runner.recordLatency = false;
  bootstrap.total = await feeder.publishBootstrap();
  await bus.idle();
  // Building the book takes a while; catch up on the market time that passed meanwhile before
  // calling the state rebuilt, so that the live feed (and its latency) starts from the present.
  for (let i = 0; i < 20; i++) {
    await feeder.step();
    await bus.idle();
    if (clock.now() - feeder.lastStepMs < 250) break;
  }
  await runner.flushNow();
  runner.recordLatency = true;
  checks.stateRebuilt = true;
  const st = engine.stats();
  log.info(
    {
      inputs: bootstrap.total,
      positions: st.positions,
      instruments: st.instruments,
      caughtUpTo: new Date(feeder.lastStepMs).toISOString(),
    },
    'bootstrap applied',
  );
  feeder.start();
  checks.feedRunning = true;
  metrics.setReady(true);

  // Rates for the summary are differences between two samples of monotone counters.
  let prev = { at: Date.now(), records: runner.stats().records, revals: engine.stats().revaluations };
  const sample = (): SummarySample => {
    const at = Date.now();
    const rs = runner.stats();
    const es = engine.stats();
    const dt = Math.max(1e-3, (at - prev.at) / 1000);
    const inputsPerSec = (rs.records - prev.records) / dt;
    const revaluationsPerSec = (es.revaluations - prev.revals) / dt;
    prev = { at, records: rs.records, revals: es.revaluations };
    const [p50, p99] = runner.latency.percentiles([0.5, 0.99]);
    runner.latency.reset();
    const snap = engine.snapshot();
    const limits = engine
      .limits()
      .sort((a, b) => b.utilization - a.utilization || (a.limitId < b.limitId ? -1 : 1))
      .slice(0, 5);
    return {
      marketMs: clock.now(),
      speed,
      url: http.url,
      ready: checks.stateRebuilt && checks.feedRunning,
      firm: snap.find((e) => e.nodeKey === 'firm'),
      desks: snap.filter((e) => e.node.desk && !e.node.book && !e.node.underlying && !e.node.tenor),
      limits,
      recentAlerts: alertLog.recent(5),
      inputsPerSec,
      revaluationsPerSec,
      p50Ms: p50 ?? Number.NaN,
      p99Ms: p99 ?? Number.NaN,
      positions: es.positions,
      nodes: snap.length,
      rejected: rs.rejected,
      staleFeeds: engine.feeds().filter((f) => f.stale).length,
    };
  };
  const printer = opts.summary ? new SummaryPrinter({ ...opts.summary, sample }) : null;
  printer?.start();

  let stopping: Promise<void> | null = null;
  return {
    url: http.url,
    port: http.port,
    engine,
    runner,
    bus,
    finalLine: () => renderSummaryLine(sample()),
    stop: () =>
      (stopping ??= (async () => {
        printer?.stop();
        checks.feedRunning = false;
        metrics.setReady(false);
        await feeder.stop();
        // Let what is queued be applied, but never let a backlog hold up a shutdown for long.
        await Promise.race([bus.idle(), new Promise((r) => setTimeout(r, 2_000).unref())]);
        await runner.stop();
        sse.close();
        await bus.close();
        await http.close();
        log.info({ ...runner.stats(), feed: feeder.stats() }, 'stopped');
      })()),
  };
}
