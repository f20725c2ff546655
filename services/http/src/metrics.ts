// Prometheus instrumentation of one Keelson process. The engine knows nothing of prom-client: it
// calls the plain `observer` hooks, and everything that is a level rather than an event (positions,
// feed ages, limit utilizations) is read from the bound engine at scrape time, so the hot path pays
// one counter increment per event and nothing per scrape.
//
// Every label set is bounded by construction, because a risk book is large and a Prometheus server
// is not: input types come from the contract's closed list, underlyings are capped (the rest folded
// into `underlying="other"`), limits are the top N by utilization, partitions are what the consumer
// owns. No trade id ever becomes a label.
import { ALERT_LEVELS, ALERT_STATES, INPUT_TYPES, UNPRICED_REASONS } from '@keelson/shared-types';
import { Counter, Gauge, Histogram, Registry, collectDefaultMetrics } from 'prom-client';

export type InputOutcome = 'accepted' | 'duplicate' | 'rejected';

/** The fields of a contract `alert` message that metrics use (an AlertMsg satisfies it). */
export interface ObservedAlert {
  limitId: string;
  severity: string;
  state: string;
  utilization?: number;
}

/** Structurally the engine's EngineObserver: the engine is handed this object as its observer. */
export interface EngineObserver {
  input?(type: string, outcome: InputOutcome, count?: number): void;
  revaluations?(count: number): void;
  exposuresChanged?(count: number): void;
  alert?(a: ObservedAlert): void;
  staleFeed?(e: { state: string }): void;
}

/** What the metrics read from an engine (or an aggregation stage) at scrape time. */
export interface MetricsSource {
  stats(): { positions: number; unpriced: Record<string, number> };
  feeds(): { underlying: string; lastTickMs: number; stale: boolean }[];
  openAlerts(): ObservedAlert[];
  /** Current utilization of every limit; without it the utilization of each open alert is used. */
  utilizations?(): { limitId: string; utilization: number }[];
}

export interface MetricsOptions {
  /** Distinct `underlying` label values before the rest fold into "other" (default 200). */
  maxUnderlyingLabels?: number;
  /** Limits exported in keelson_limit_utilization, the closest to breach first (default 20). */
  topLimits?: number;
  /** Node's process metrics and event-loop delay, prefixed keelson_ (default true). */
  defaultMetrics?: boolean;
  /** Scrape-time clock in epoch ms, for feed ages (default Date.now). */
  now?: () => number;
}

// Label values come from the contract's closed lists (shared-types). Any other input type an engine
// reports (a record whose type is not a contract type, or undecodable JSON) is counted as `unknown`,
// so a hostile feed cannot mint labels.
const OUTCOMES: readonly InputOutcome[] = ['accepted', 'duplicate', 'rejected'];
// The (severity, state) pairs the contract's level rules can produce: raised goes to warning or
// breach, escalated only to breach, eased only to warning, cleared only to ok.
const ALERT_TRANSITIONS = [
  ['warning', 'raised'],
  ['breach', 'raised'],
  ['breach', 'escalated'],
  ['warning', 'eased'],
  ['ok', 'cleared'],
] as const;

/** 1 ms .. 10 s, denser around the 50 ms engine target and the 250 ms end-to-end budget. */
export const LATENCY_BUCKETS = [
  0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.075, 0.1, 0.25, 0.5, 1, 2.5, 5, 10,
];

export const OTHER_UNDERLYING = 'other';

export class KeelsonMetrics {
  readonly registry: Registry;
  readonly observer: EngineObserver;
  readonly contentType: string;

  private readonly now: () => number;
  private readonly maxUnderlyingLabels: number;
  private readonly topLimits: number;
  private source: MetricsSource | undefined;
  /** Underlyings that own a label, kept for the life of the process so series do not churn. */
  private readonly labelledUnderlyings = new Set<string>();

  private readonly inputs: Counter<'type' | 'outcome'>;
  private readonly revaluationsTotal: Counter;
  private readonly exposureUpdates: Counter;
  private readonly alerts: Counter<'severity' | 'state'>;
  private readonly tickToPublishHist: PlainHistogram;
  private readonly busToPublishHist: PlainHistogram;
  private readonly batchHist: Histogram;
  private readonly staleFeedEvents: Counter<'state'>;
  private readonly latencyAnomalies: Counter<'measure' | 'kind'>;
  private readonly lag: Gauge<'topic' | 'partition'>;
  private readonly ready: Gauge;
  private readonly sourceErrors: Counter<'read'>;

  constructor(opts: MetricsOptions = {}) {
    this.now = opts.now ?? Date.now;
    this.maxUnderlyingLabels = positiveInt(opts.maxUnderlyingLabels ?? 200, 'maxUnderlyingLabels');
    this.topLimits = positiveInt(opts.topLimits ?? 20, 'topLimits');
    const registry = new Registry();
    this.registry = registry;
    this.contentType = registry.contentType;
    const registers = [registry];

    this.inputs = new Counter({
      name: 'keelson_inputs_total',
      help: 'Input records by contract message type (unknown = undecodable or not a contract type) and outcome.',
      labelNames: ['type', 'outcome'],
      registers,
    });
    // Zero every series up front: rate() and the alert rules then see a series from the first scrape.
    for (const type of [...INPUT_TYPES, 'unknown'])
      for (const outcome of OUTCOMES) this.inputs.inc({ type, outcome }, 0);

    this.revaluationsTotal = new Counter({
      name: 'keelson_revaluations_total',
      help: 'Instrument revaluations performed (one per distinct instrument priced, not per trade).',
      registers,
    });
    this.exposureUpdates = new Counter({
      name: 'keelson_exposure_updates_total',
      help: 'Aggregation nodes whose exposure changed.',
      registers,
    });
    this.alerts = new Counter({
      name: 'keelson_alerts_total',
      help: 'Limit alerts published, by severity reached and transition (raised, escalated, eased, cleared).',
      labelNames: ['severity', 'state'],
      registers,
    });
    for (const [severity, state] of ALERT_TRANSITIONS) this.alerts.inc({ severity, state }, 0);

    this.staleFeedEvents = new Counter({
      name: 'keelson_stale_feed_events_total',
      help: 'stale-feed events published: raised when an underlying goes quiet past the threshold, cleared when spots resume.',
      labelNames: ['state'],
      registers,
    });
    for (const state of ['raised', 'cleared']) this.staleFeedEvents.inc({ state }, 0);

    // One sample per tick, at tens of thousands a second: these two take the cheap path.
    this.tickToPublishHist = new PlainHistogram(
      'keelson_tick_to_publish_seconds',
      "From a spot's own ts to publication of the exposure nodes it changed.",
      LATENCY_BUCKETS,
    );
    registry.registerMetric(this.tickToPublishHist as unknown as Histogram);
    this.busToPublishHist = new PlainHistogram(
      'keelson_bus_to_publish_seconds',
      "From the input record's bus timestamp to publication of its outputs (our own delay, without the feed's).",
      LATENCY_BUCKETS,
    );
    registry.registerMetric(this.busToPublishHist as unknown as Histogram);
    this.batchHist = new Histogram({
      name: 'keelson_batch_processing_seconds',
      help: 'Time to apply one consumed batch and publish its outputs.',
      buckets: LATENCY_BUCKETS,
      registers,
    });
    this.latencyAnomalies = new Counter({
      name: 'keelson_latency_anomalies_total',
      help: 'Latency samples that could not be observed as given: negative (clock skew, counted as 0 s) or non-finite (dropped).',
      labelNames: ['measure', 'kind'],
      registers,
    });

    this.scrapedGauge(
      {
        name: 'keelson_feed_staleness_seconds',
        help: `Age of the last spot per underlying at scrape time. At most ${this.maxUnderlyingLabels} underlyings get their own label; the rest are folded into underlying="${OTHER_UNDERLYING}", which reports the oldest of them.`,
        labelNames: ['underlying'],
      },
      (g) => {
        this.collectStaleness(g);
      },
    );
    this.scrapedGauge(
      {
        name: 'keelson_stale_underlyings',
        help: "Underlyings whose last spot is older than the engine's staleness threshold (all of them, not capped).",
      },
      (g) => {
        const feeds = this.read('feeds', (s) => s.feeds());
        if (feeds) g.set(feeds.filter((f) => f.stale).length);
      },
    );
    this.lag = new Gauge({
      name: 'keelson_consumer_lag_messages',
      help: 'Records between the consumer position and the end of each assigned input partition.',
      labelNames: ['topic', 'partition'],
      registers,
    });
    this.scrapedGauge(
      {
        name: 'keelson_positions',
        help: 'Live (not cancelled) positions held, priced or not.',
      },
      (g) => {
        const stats = this.read('stats', (s) => s.stats());
        if (stats) g.set(stats.positions);
      },
    );
    this.scrapedGauge(
      {
        name: 'keelson_unpriced_positions',
        help: 'Live positions left out of the sums for a missing input, by the first missing reason.',
        labelNames: ['reason'],
      },
      (g) => {
        const stats = this.read('stats', (s) => s.stats());
        if (!stats) return;
        g.reset();
        for (const reason of UNPRICED_REASONS) g.set({ reason }, stats.unpriced[reason] ?? 0);
        // A reason the contract does not list yet is still shown rather than hidden.
        for (const [reason, n] of Object.entries(stats.unpriced)) {
          if (!(UNPRICED_REASONS as readonly string[]).includes(reason)) g.set({ reason }, n);
        }
      },
    );
    this.scrapedGauge(
      {
        name: 'keelson_limit_utilization',
        help: 'Utilization (value / bound) of the limits closest to breach; only the top N limits are exported, series leave when a limit drops out.',
        labelNames: ['limit_id'],
      },
      (g) => {
        this.collectUtilization(g);
      },
    );
    this.scrapedGauge(
      {
        name: 'keelson_open_alerts',
        help: 'Limits currently not at ok, by severity held.',
        labelNames: ['severity'],
      },
      (g) => {
        const open = this.read('openAlerts', (s) => s.openAlerts());
        if (!open) return;
        g.reset();
        g.set({ severity: 'warning' }, 0);
        g.set({ severity: 'breach' }, 0);
        for (const a of open)
          if (a.severity === 'warning' || a.severity === 'breach') g.inc({ severity: a.severity });
      },
    );
    this.ready = new Gauge({
      name: 'keelson_ready',
      help: '1 when the process has rebuilt its state and is connected, else 0 (see /readyz for why).',
      registers,
    });
    this.ready.set(0);
    this.sourceErrors = new Counter({
      name: 'keelson_metrics_source_errors_total',
      help: 'Scrape-time reads of the engine that threw; the affected gauges keep their previous value.',
      labelNames: ['read'],
      registers,
    });

    if (opts.defaultMetrics ?? true) collectDefaultMetrics({ register: registry, prefix: 'keelson_' });

    this.observer = {
      input: (type, outcome, count = 1) => {
        const t = (INPUT_TYPES as readonly string[]).includes(type) ? type : 'unknown';
        if (OUTCOMES.includes(outcome) && Number.isFinite(count) && count > 0)
          this.inputs.inc({ type: t, outcome }, count);
      },
      revaluations: (count) => {
        if (Number.isFinite(count) && count > 0) this.revaluationsTotal.inc(count);
      },
      exposuresChanged: (count) => {
        if (Number.isFinite(count) && count > 0) this.exposureUpdates.inc(count);
      },
      alert: (a) => {
        const severity = (ALERT_LEVELS as readonly string[]).includes(a.severity) ? a.severity : 'unknown';
        const state = (ALERT_STATES as readonly string[]).includes(a.state) ? a.state : 'unknown';
        this.alerts.inc({ severity, state });
      },
      staleFeed: (e) => {
        if (e.state === 'raised' || e.state === 'cleared') this.staleFeedEvents.inc({ state: e.state });
      },
    };
  }

  tickToPublish(spotTsMs: number, publishedMs: number): void {
    this.observeLatency(this.tickToPublishHist, 'tick_to_publish', publishedMs - spotTsMs);
  }

  busToPublish(busTsMs: number, publishedMs: number): void {
    this.observeLatency(this.busToPublishHist, 'bus_to_publish', publishedMs - busTsMs);
  }

  batchProcessed(seconds: number): void {
    this.observeLatency(this.batchHist, 'batch_processing', seconds * 1000);
  }

  consumerLag(topic: string, partition: number, lag: number): void {
    if (!Number.isFinite(lag)) return;
    // High watermark and committed offset are read at different instants; a transient negative is 0.
    this.lag.set({ topic, partition: String(partition) }, Math.max(0, lag));
  }

  /** Drop a partition's lag series once it is revoked, so a rebalance leaves no frozen series. */
  forgetConsumerLag(topic: string, partition: number): void {
    this.lag.remove({ topic, partition: String(partition) });
  }

  setReady(ready: boolean): void {
    this.ready.set(ready ? 1 : 0);
  }

  bindEngine(src: MetricsSource): void {
    this.source = src;
  }

  text(): Promise<string> {
    return this.registry.metrics();
  }

  private observeLatency(h: { observe(seconds: number): void }, measure: string, ms: number): void {
    if (!Number.isFinite(ms)) {
      this.latencyAnomalies.inc({ measure, kind: 'non_finite' });
      return;
    }
    if (ms < 0) this.latencyAnomalies.inc({ measure, kind: 'negative' });
    h.observe(Math.max(0, ms) / 1000);
  }

  /** A gauge whose value is read from the bound engine each time it is scraped. */
  private scrapedGauge<L extends string>(
    cfg: { name: string; help: string; labelNames?: L[] },
    fill: (g: Gauge<L>) => void,
  ): void {
    new Gauge<L>({
      ...cfg,
      registers: [this.registry],
      collect() {
        fill(this);
      },
    });
  }

  /** A scrape must not fail because the engine threw; count it and keep the last value. */
  private read<T>(what: string, f: (s: MetricsSource) => T): T | undefined {
    if (!this.source) return undefined;
    try {
      return f(this.source);
    } catch {
      this.sourceErrors.inc({ read: what });
      return undefined;
    }
  }

  private collectStaleness(g: Gauge<'underlying'>): void {
    const feeds = this.read('feeds', (s) => s.feeds());
    if (!feeds) return;
    const nowMs = this.now();
    g.reset();
    let otherAge = -1;
    for (const f of feeds) {
      if (!Number.isFinite(f.lastTickMs)) continue;
      const age = Math.max(0, nowMs - f.lastTickMs) / 1000;
      if (
        !this.labelledUnderlyings.has(f.underlying) &&
        this.labelledUnderlyings.size < this.maxUnderlyingLabels
      ) {
        this.labelledUnderlyings.add(f.underlying);
      }
      if (this.labelledUnderlyings.has(f.underlying)) g.set({ underlying: f.underlying }, age);
      else otherAge = Math.max(otherAge, age);
    }
    if (otherAge >= 0) g.set({ underlying: OTHER_UNDERLYING }, otherAge);
  }

  private collectUtilization(g: Gauge<'limit_id'>): void {
    const src = this.source;
    if (!src) return;
    const all = src.utilizations
      ? this.read('utilizations', (s) => s.utilizations?.() ?? [])
      : this.read('openAlerts', (s) =>
          s.openAlerts().map((a) => ({ limitId: a.limitId, utilization: a.utilization ?? Number.NaN })),
        );
    if (!all) return;
    const top = all
      .filter((u) => Number.isFinite(u.utilization))
      // Highest utilization first; ties by limitId so the exported set is the same on every scrape.
      .sort(
        (a, b) =>
          b.utilization - a.utilization || (a.limitId < b.limitId ? -1 : a.limitId > b.limitId ? 1 : 0),
      )
      .slice(0, this.topLimits);
    g.reset();
    for (const u of top) g.set({ limit_id: u.limitId }, u.utilization);
  }
}

function positiveInt(n: number, field: string): number {
  if (!Number.isInteger(n) || n < 1)
    throw new RangeError(`MetricsOptions.${field} must be an integer >= 1, got ${n}`);
  return n;
}

interface HistogramValue {
  labels: Record<string, string | number>;
  value: number;
  metricName: string;
  exemplar?: null;
}

/**
 * A histogram without labels whose observe() is a bucket search over a typed array: prom-client's
 * Histogram builds a closure and hashes the label set on every observation, which at one sample
 * per tick was a tenth of the streaming engine's time. It is registered in the same prom-client
 * registry and exposed in exactly the form prom-client gives its own histograms (a test compares
 * the two texts).
 */
export class PlainHistogram {
  readonly type = 'histogram';
  readonly aggregator = 'sum';
  private readonly bounds: Float64Array;
  private readonly counts: Float64Array;
  private sum = 0;
  private count = 0;

  constructor(
    readonly name: string,
    readonly help: string,
    private readonly upperBounds: readonly number[],
  ) {
    this.bounds = Float64Array.from(upperBounds);
    this.counts = new Float64Array(upperBounds.length);
  }

  /** As prom-client: a non-finite value is refused with a TypeError. */
  observe(value: number): void {
    if (!Number.isFinite(value)) throw new TypeError(`Value is not a valid number: ${value}`);
    const b = this.bounds;
    for (let i = 0; i < b.length; i++) {
      if (value <= (b[i] as number)) {
        this.counts[i]! += 1;
        break;
      }
    }
    this.sum += value;
    this.count += 1;
  }

  reset(): void {
    this.counts.fill(0);
    this.sum = 0;
    this.count = 0;
  }

  get(): {
    name: string;
    help: string;
    type: 'histogram';
    aggregator: 'sum';
    values: HistogramValue[];
  } {
    const values: HistogramValue[] = [];
    let acc = 0;
    for (let i = 0; i < this.upperBounds.length; i++) {
      acc += this.counts[i] as number;
      values.push({
        labels: { le: this.upperBounds[i] as number },
        value: acc,
        metricName: `${this.name}_bucket`,
        exemplar: null,
      });
    }
    values.push({
      labels: { le: '+Inf' },
      value: this.count,
      metricName: `${this.name}_bucket`,
      exemplar: null,
    });
    values.push({ labels: {}, value: this.sum, metricName: `${this.name}_sum` });
    values.push({ labels: {}, value: this.count, metricName: `${this.name}_count` });
    return { name: this.name, help: this.help, type: this.type, aggregator: this.aggregator, values };
  }
}
