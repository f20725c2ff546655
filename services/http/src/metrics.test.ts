// The /metrics text is read back with parse-prometheus-text-format (npm; a port of the Prometheus
// Python client's parser), so these checks go through the exposition format an actual Prometheus
// server reads, not through prom-client's own objects.
import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { Histogram, Registry } from 'prom-client';
import { KeelsonMetrics, LATENCY_BUCKETS, PlainHistogram, type MetricsSource } from './metrics.ts';

interface Family {
  name: string;
  help: string;
  type: string;
  metrics: {
    value?: string;
    labels?: Record<string, string>;
    buckets?: Record<string, string>;
    count?: string;
    sum?: string;
  }[];
}
const parse = createRequire(import.meta.url)('parse-prometheus-text-format') as (text: string) => Family[];

async function scrape(m: KeelsonMetrics): Promise<Map<string, Family>> {
  return new Map(parse(await m.text()).map((f) => [f.name, f]));
}

function value(
  fams: Map<string, Family>,
  name: string,
  labels: Record<string, string> = {},
): number | undefined {
  const fam = fams.get(name);
  const s = fam?.metrics.find((m) => Object.entries(labels).every(([k, v]) => m.labels?.[k] === v));
  return s?.value === undefined ? undefined : Number(s.value);
}

function series(fams: Map<string, Family>, name: string): Record<string, string>[] {
  return (fams.get(name)?.metrics ?? []).map((m) => m.labels ?? {});
}

function fakeSource(over: Partial<MetricsSource> = {}): MetricsSource {
  return {
    stats: () => ({ positions: 0, unpriced: {} }),
    feeds: () => [],
    openAlerts: () => [],
    ...over,
  };
}

describe('KeelsonMetrics: event counters through the observer', () => {
  it('counts inputs by type and outcome, folding unknown types', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    const o = m.observer;
    for (let i = 0; i < 5; i++) o.input?.('spot', 'accepted');
    o.input?.('trade', 'accepted');
    o.input?.('trade', 'duplicate');
    o.input?.('trade', 'duplicate');
    o.input?.('spot', 'rejected');
    o.input?.('unknown', 'rejected');
    o.input?.('made-up-type', 'rejected'); // not a contract type: must not mint a label
    const f = await scrape(m);
    expect(value(f, 'keelson_inputs_total', { type: 'spot', outcome: 'accepted' })).toBe(5);
    expect(value(f, 'keelson_inputs_total', { type: 'trade', outcome: 'accepted' })).toBe(1);
    expect(value(f, 'keelson_inputs_total', { type: 'trade', outcome: 'duplicate' })).toBe(2);
    expect(value(f, 'keelson_inputs_total', { type: 'spot', outcome: 'rejected' })).toBe(1);
    expect(value(f, 'keelson_inputs_total', { type: 'unknown', outcome: 'rejected' })).toBe(2);
    // Series that saw nothing exist at 0 so that rate() works from the first scrape.
    expect(value(f, 'keelson_inputs_total', { type: 'curve', outcome: 'accepted' })).toBe(0);
    // 7 contract input types + unknown, times 3 outcomes: the label set is closed.
    expect(series(f, 'keelson_inputs_total')).toHaveLength(24);
    expect(series(f, 'keelson_inputs_total').some((l) => l.type === 'made-up-type')).toBe(false);
  });

  it('counts revaluations, exposure updates and alert transitions', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    const o = m.observer;
    o.revaluations?.(120);
    o.revaluations?.(30);
    o.revaluations?.(-4); // a bad count must not throw inside the engine, nor decrease a counter
    o.exposuresChanged?.(7);
    o.exposuresChanged?.(Number.NaN);
    const alert = (severity: string, state: string) => ({
      limitId: 'L-1',
      severity,
      state,
      utilization: 0.9,
    });
    o.alert?.(alert('warning', 'raised'));
    o.alert?.(alert('breach', 'escalated'));
    o.alert?.(alert('warning', 'eased'));
    o.alert?.(alert('ok', 'cleared'));
    o.alert?.(alert('breach', 'raised'));
    o.staleFeed?.({ state: 'raised' });
    o.staleFeed?.({ state: 'raised' });
    o.staleFeed?.({ state: 'cleared' });
    const f = await scrape(m);
    expect(value(f, 'keelson_stale_feed_events_total', { state: 'raised' })).toBe(2);
    expect(value(f, 'keelson_stale_feed_events_total', { state: 'cleared' })).toBe(1);
    expect(value(f, 'keelson_revaluations_total')).toBe(150);
    expect(value(f, 'keelson_exposure_updates_total')).toBe(7);
    expect(value(f, 'keelson_alerts_total', { severity: 'warning', state: 'raised' })).toBe(1);
    expect(value(f, 'keelson_alerts_total', { severity: 'breach', state: 'escalated' })).toBe(1);
    expect(value(f, 'keelson_alerts_total', { severity: 'warning', state: 'eased' })).toBe(1);
    expect(value(f, 'keelson_alerts_total', { severity: 'ok', state: 'cleared' })).toBe(1);
    expect(value(f, 'keelson_alerts_total', { severity: 'breach', state: 'raised' })).toBe(1);
  });
});

describe('PlainHistogram', () => {
  it('exposes exactly the text prom-client gives its own Histogram for the same samples', async () => {
    // The reference is prom-client itself: same name, help, buckets and observations.
    const theirs = new Registry();
    const ours = new Registry();
    const ref = new Histogram({
      name: 'h_seconds',
      help: 'a "help" line',
      buckets: LATENCY_BUCKETS,
      registers: [theirs],
    });
    const plain = new PlainHistogram('h_seconds', 'a "help" line', LATENCY_BUCKETS);
    ours.registerMetric(plain as unknown as Histogram);
    expect(await ours.metrics()).toBe(await theirs.metrics()); // empty
    let seed = 3;
    const r = () => (seed = (Math.imul(seed, 1103515245) + 12345) >>> 0) / 2 ** 32;
    const edges = [0, 0.001, 0.0025, 10, 10.000001, 1e6];
    for (let i = 0; i < 5000; i++) {
      const v = i < edges.length ? edges[i]! : r() < 0.5 ? r() * 0.2 : r() * 20;
      ref.observe(v);
      plain.observe(v);
    }
    expect(await ours.metrics()).toBe(await theirs.metrics());
    expect(await ours.getMetricsAsJSON()).toEqual(await theirs.getMetricsAsJSON());
    expect(() => plain.observe(Number.NaN)).toThrow(TypeError);
    ref.reset();
    plain.reset();
    ref.observe(0.3);
    plain.observe(0.3);
    expect(await ours.metrics()).toBe(await theirs.metrics());
  });
});

describe('KeelsonMetrics: latency histograms', () => {
  it('places samples in cumulative le buckets (Prometheus exposition format: bucket le counts samples <= le)', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    const t0 = Date.UTC(2026, 2, 2, 14, 30, 0);
    m.tickToPublish(t0, t0 + 3); // 3 ms
    m.tickToPublish(t0, t0 + 40); // 40 ms
    m.tickToPublish(t0, t0 + 1200); // 1.2 s
    m.tickToPublish(t0, t0 - 2); // clock skew: counted at 0 and flagged
    m.tickToPublish(t0, Number.NaN); // dropped and flagged
    m.busToPublish(t0, t0 + 10);
    m.batchProcessed(0.0004);
    const f = await scrape(m);
    const h = f.get('keelson_tick_to_publish_seconds')?.metrics[0];
    expect(h?.count).toBe('4');
    expect(Number(h?.sum)).toBeCloseTo(0.003 + 0.04 + 1.2 + 0, 12);
    expect(h?.buckets?.['0.001']).toBe('1'); // the skewed sample, at 0
    expect(h?.buckets?.['0.005']).toBe('2');
    expect(h?.buckets?.['0.05']).toBe('3');
    expect(h?.buckets?.['1']).toBe('3');
    expect(h?.buckets?.['2.5']).toBe('4');
    expect(h?.buckets?.['10']).toBe('4');
    expect(
      value(f, 'keelson_latency_anomalies_total', { measure: 'tick_to_publish', kind: 'negative' }),
    ).toBe(1);
    expect(
      value(f, 'keelson_latency_anomalies_total', { measure: 'tick_to_publish', kind: 'non_finite' }),
    ).toBe(1);
    const b = f.get('keelson_bus_to_publish_seconds')?.metrics[0];
    expect(b?.buckets?.['0.005']).toBe('0');
    expect(b?.buckets?.['0.01']).toBe('1');
    expect(f.get('keelson_batch_processing_seconds')?.metrics[0]?.buckets?.['0.001']).toBe('1');
  });

  it('covers 1 ms to 10 s', async () => {
    const f = await scrape(new KeelsonMetrics({ defaultMetrics: false }));
    const les = Object.keys(f.get('keelson_tick_to_publish_seconds')?.metrics[0]?.buckets ?? {});
    const finite = les.filter((le) => le !== '+Inf').map(Number);
    expect(Math.min(...finite)).toBe(0.001);
    expect(Math.max(...finite)).toBe(10);
    expect(les).toContain('+Inf');
  });
});

describe('KeelsonMetrics: levels read from the bound engine at scrape time', () => {
  it('reports feed age from the injected clock, stale count, positions and unpriced reasons', async () => {
    let nowMs = 1_000_000;
    const m = new KeelsonMetrics({ defaultMetrics: false, now: () => nowMs });
    m.bindEngine(
      fakeSource({
        stats: () => ({ positions: 42, unpriced: { 'no-vol': 3, 'no-fx': 1 } }),
        feeds: () => [
          { underlying: 'ORRERY', lastTickMs: 999_500, stale: false },
          { underlying: 'TALLOW', lastTickMs: 990_000, stale: true },
        ],
      }),
    );
    let f = await scrape(m);
    expect(value(f, 'keelson_feed_staleness_seconds', { underlying: 'ORRERY' })).toBe(0.5);
    expect(value(f, 'keelson_feed_staleness_seconds', { underlying: 'TALLOW' })).toBe(10);
    expect(value(f, 'keelson_stale_underlyings')).toBe(1);
    expect(value(f, 'keelson_positions')).toBe(42);
    expect(value(f, 'keelson_unpriced_positions', { reason: 'no-vol' })).toBe(3);
    expect(value(f, 'keelson_unpriced_positions', { reason: 'no-fx' })).toBe(1);
    expect(value(f, 'keelson_unpriced_positions', { reason: 'no-spot' })).toBe(0);
    nowMs += 2500; // ages grow with the scrape clock, nothing else changed
    f = await scrape(m);
    expect(value(f, 'keelson_feed_staleness_seconds', { underlying: 'ORRERY' })).toBe(3);
  });

  it('caps underlying labels, folds the rest into "other" with their oldest age, and says so in HELP', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false, maxUnderlyingLabels: 2, now: () => 100_000 });
    const feeds = [
      { underlying: 'AAA', lastTickMs: 99_000, stale: false },
      { underlying: 'BBB', lastTickMs: 98_000, stale: false },
      { underlying: 'CCC', lastTickMs: 97_000, stale: false },
      { underlying: 'DDD', lastTickMs: 60_000, stale: true },
    ];
    m.bindEngine(fakeSource({ feeds: () => feeds }));
    let f = await scrape(m);
    expect(series(f, 'keelson_feed_staleness_seconds').map((l) => l.underlying)).toEqual([
      'AAA',
      'BBB',
      'other',
    ]);
    expect(value(f, 'keelson_feed_staleness_seconds', { underlying: 'other' })).toBe(40);
    expect(f.get('keelson_feed_staleness_seconds')?.help).toContain('underlying="other"');
    // Label slots are sticky: a new first feed does not evict an earlier one (no series churn).
    feeds.unshift({ underlying: 'AAB', lastTickMs: 99_900, stale: false });
    f = await scrape(m);
    expect(series(f, 'keelson_feed_staleness_seconds').map((l) => l.underlying)).toEqual([
      'AAA',
      'BBB',
      'other',
    ]);
  });

  it('exports only the top N utilizations and drops a limit that leaves the top N', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false, topLimits: 2 });
    let utils = [
      { limitId: 'L-A', utilization: 0.5 },
      { limitId: 'L-B', utilization: 0.95 },
      { limitId: 'L-C', utilization: 1.1 },
    ];
    m.bindEngine(fakeSource({ utilizations: () => utils }));
    let f = await scrape(m);
    expect(series(f, 'keelson_limit_utilization').map((l) => l.limit_id)).toEqual(['L-C', 'L-B']);
    expect(value(f, 'keelson_limit_utilization', { limit_id: 'L-C' })).toBe(1.1);
    utils = [
      { limitId: 'L-A', utilization: 0.99 },
      { limitId: 'L-B', utilization: 0.2 },
      { limitId: 'L-C', utilization: 1.1 },
    ];
    f = await scrape(m);
    expect(series(f, 'keelson_limit_utilization').map((l) => l.limit_id)).toEqual(['L-C', 'L-A']);
  });

  it('falls back to open alerts for utilization and counts open alerts by severity', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    m.bindEngine(
      fakeSource({
        openAlerts: () => [
          { limitId: 'L-X', severity: 'breach', state: 'escalated', utilization: 1.05 },
          { limitId: 'L-Y', severity: 'warning', state: 'raised', utilization: 0.82 },
          { limitId: 'L-Z', severity: 'breach', state: 'raised', utilization: 1.3 },
        ],
      }),
    );
    const f = await scrape(m);
    expect(value(f, 'keelson_open_alerts', { severity: 'breach' })).toBe(2);
    expect(value(f, 'keelson_open_alerts', { severity: 'warning' })).toBe(1);
    expect(series(f, 'keelson_limit_utilization').map((l) => l.limit_id)).toEqual(['L-Z', 'L-X', 'L-Y']);
  });

  it('keeps scraping when the engine throws, and counts it', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    m.bindEngine(
      fakeSource({
        stats: () => {
          throw new Error('boom');
        },
      }),
    );
    const f = await scrape(m);
    expect(value(f, 'keelson_metrics_source_errors_total', { read: 'stats' })).toBe(2); // positions and unpriced
  });
});

describe('KeelsonMetrics: gauges set by the runners', () => {
  it('sets consumer lag per topic and partition, clamps negatives, forgets revoked partitions', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    m.consumerLag('spots', 0, 120);
    m.consumerLag('spots', 3, -2);
    m.consumerLag('trades', 1, 7);
    let f = await scrape(m);
    expect(value(f, 'keelson_consumer_lag_messages', { topic: 'spots', partition: '0' })).toBe(120);
    expect(value(f, 'keelson_consumer_lag_messages', { topic: 'spots', partition: '3' })).toBe(0);
    m.forgetConsumerLag('spots', 0);
    f = await scrape(m);
    expect(series(f, 'keelson_consumer_lag_messages')).toHaveLength(2);
  });

  it('starts not ready and follows setReady', async () => {
    const m = new KeelsonMetrics({ defaultMetrics: false });
    expect(value(await scrape(m), 'keelson_ready')).toBe(0);
    m.setReady(true);
    expect(value(await scrape(m), 'keelson_ready')).toBe(1);
  });
});

describe('KeelsonMetrics: naming', () => {
  it('follows Prometheus naming conventions (prometheus.io "Metric and label naming")', async () => {
    const m = new KeelsonMetrics();
    const f = await scrape(m);
    for (const fam of f.values()) {
      expect(fam.name).toMatch(/^keelson_[a-z0-9_]+$/);
      // Counters end in _total; prom-client adds no suffix itself in the text format.
      if (fam.type === 'COUNTER') expect(fam.name).toMatch(/_total$/);
    }
    // Node's default process metrics, event-loop delay included, under our prefix.
    expect(f.has('keelson_process_cpu_seconds_total')).toBe(true);
    expect(f.has('keelson_nodejs_eventloop_lag_p99_seconds')).toBe(true);
    expect(m.contentType).toMatch(/^text\/plain; version=0\.0\.4/);
  });

  it('rejects a nonsensical option naming the field', () => {
    expect(() => new KeelsonMetrics({ topLimits: 0 })).toThrow(
      'MetricsOptions.topLimits must be an integer >= 1',
    );
  });
});
