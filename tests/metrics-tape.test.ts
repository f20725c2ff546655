// A short hand-written tape run through a real RiskEngine with KeelsonMetrics as its observer and
// bound source, then /metrics read back with parse-prometheus-text-format: the counts must be the
// ones the tape implies line by line (annotated below), and the one priced value exported (a
// limit's utilization) must match an independent Black-Scholes delta computed with
// @stdlib/stats-base-dists-normal-cdf (a general-purpose reference library from npm).
// Names (PELICAN, HARBOUR, HB-1, GHOSTCO) are invented for this test.
import { createRequire } from 'node:module';
import { RiskEngine } from '@keelson/engine';
import { KeelsonMetrics } from '@keelson/http';
import { describe, expect, it } from 'vitest';

const require = createRequire(import.meta.url);
const normalCdf = require('@stdlib/stats-base-dists-normal-cdf') as (
  x: number,
  mu: number,
  sigma: number,
) => number;
interface Family {
  name: string;
  metrics: { value?: string; labels?: Record<string, string> }[];
}
const parse = require('parse-prometheus-text-format') as (text: string) => Family[];

const T0 = '2026-03-02T14:30:';
const expiry = '2026-09-02T14:30:10Z';
const trade = (over: Record<string, unknown>) =>
  JSON.stringify({
    type: 'trade',
    action: 'new',
    desk: 'HARBOUR',
    book: 'HB-1',
    underlying: 'PELICAN',
    price: 0,
    ...over,
  });

// [raw line, expected outcome]
const TAPE: [string, 'accepted' | 'duplicate' | 'rejected'][] = [
  [
    JSON.stringify({
      type: 'underlying',
      underlying: 'PELICAN',
      kind: 'equity',
      currency: 'USD',
      ts: `${T0}00Z`,
    }),
    'accepted',
  ],
  [
    JSON.stringify({ type: 'curve', currency: 'USD', ts: `${T0}00Z`, tenors: [1], zeroRates: [0.04] }),
    'accepted',
  ],
  [
    JSON.stringify({
      type: 'vol-surface',
      underlying: 'PELICAN',
      ts: `${T0}00Z`,
      expiries: [expiry],
      strikes: [100],
      vols: [[0.2]],
    }),
    'accepted',
  ],
  [JSON.stringify({ type: 'spot', underlying: 'PELICAN', price: 100, ts: `${T0}00Z` }), 'accepted'],
  [
    JSON.stringify({
      type: 'limit',
      limitId: 'L-PELICAN-DELTA',
      scope: { underlying: 'PELICAN' },
      metric: 'delta',
      max: 500,
      ts: `${T0}00Z`,
    }),
    'accepted',
  ],
  // delta 1000 against max 500: u = 2, raised straight to breach
  [
    trade({
      tradeId: 'T-1',
      version: 1,
      ts: `${T0}01Z`,
      instrument: { kind: 'linear' },
      quantity: 1000,
      price: 99,
    }),
    'accepted',
  ],
  [
    trade({
      tradeId: 'T-2',
      version: 1,
      ts: `${T0}01Z`,
      instrument: { kind: 'option', right: 'call', strike: 100, expiry, multiplier: 1 },
      quantity: 1,
      price: 6,
    }),
    'accepted',
  ],
  // the same version resent: a duplicate, counted and ignored
  [
    trade({
      tradeId: 'T-2',
      version: 1,
      ts: `${T0}01Z`,
      instrument: { kind: 'option', right: 'call', strike: 100, expiry, multiplier: 1 },
      quantity: 1,
      price: 6,
    }),
    'duplicate',
  ],
  // no reference data for GHOSTCO: a live position, unpriced with reason no-reference
  [
    trade({
      tradeId: 'T-3',
      version: 1,
      ts: `${T0}01Z`,
      underlying: 'GHOSTCO',
      instrument: { kind: 'linear' },
      quantity: 5,
      price: 10,
    }),
    'accepted',
  ],
  [JSON.stringify({ type: 'spot', underlying: 'PELICAN', price: 101, ts: `${T0}01Z` }), 'accepted'],
  [JSON.stringify({ type: 'spot', underlying: 'PELICAN', price: -1, ts: `${T0}02Z` }), 'rejected'], // price must be > 0
  ['{"type":"spot","underlying":', 'rejected'], // not JSON: type unknown
  [JSON.stringify({ type: 'bogus', ts: `${T0}02Z` }), 'rejected'], // not a contract type: counted as unknown
  // T-1 cancelled: delta is the option's alone (< 1), far under 500 - 0.05: cleared
  [
    JSON.stringify({
      type: 'trade',
      tradeId: 'T-1',
      version: 2,
      action: 'cancel',
      underlying: 'PELICAN',
      ts: `${T0}10Z`,
    }),
    'accepted',
  ],
  // a late lower version of a cancelled trade: stale, counted as duplicate
  [
    trade({
      tradeId: 'T-1',
      version: 1,
      ts: `${T0}10Z`,
      instrument: { kind: 'linear' },
      quantity: 1000,
      price: 99,
    }),
    'duplicate',
  ],
];

describe('metrics from a real engine over a tape', () => {
  it('count what the tape implies', async () => {
    // Scrape time is tape time (the engine's valuation time), as a replay would report it.
    const holder: { engine?: RiskEngine } = {};
    const metrics = new KeelsonMetrics({
      defaultMetrics: false,
      now: () => holder.engine?.stats().valuationMs ?? 0,
    });
    const engine = new RiskEngine({ clock: 'event', observer: metrics.observer });
    holder.engine = engine;
    metrics.bindEngine(engine);

    TAPE.forEach(([raw, expected], i) => {
      expect(engine.ingest(raw, `metrics tape line ${i + 1}`), `line ${i + 1}`).toBe(expected);
    });
    engine.revalueAll(); // end of tape, as replay does: everything valued at the last tape time

    const fams = new Map(parse(await metrics.text()).map((f) => [f.name, f]));
    const v = (name: string, labels: Record<string, string> = {}) => {
      const s = fams
        .get(name)
        ?.metrics.find((m) => Object.entries(labels).every(([k, x]) => m.labels?.[k] === x));
      return s?.value === undefined ? undefined : Number(s.value);
    };
    const inputs = (type: string, outcome: string) => v('keelson_inputs_total', { type, outcome });

    expect(inputs('underlying', 'accepted')).toBe(1);
    expect(inputs('curve', 'accepted')).toBe(1);
    expect(inputs('vol-surface', 'accepted')).toBe(1);
    expect(inputs('limit', 'accepted')).toBe(1);
    expect(inputs('spot', 'accepted')).toBe(2);
    expect(inputs('spot', 'rejected')).toBe(1);
    expect(inputs('unknown', 'rejected')).toBe(2);
    expect(inputs('trade', 'accepted')).toBe(4); // T-1, T-2, T-3, T-1 cancel
    expect(inputs('trade', 'duplicate')).toBe(2);
    const total = [...(fams.get('keelson_inputs_total')?.metrics ?? [])].reduce(
      (n, m) => n + Number(m.value),
      0,
    );
    expect(total).toBe(TAPE.length);

    // One episode on the delta limit: raised to breach by T-1, cleared by its cancel.
    expect(v('keelson_alerts_total', { severity: 'breach', state: 'raised' })).toBe(1);
    expect(v('keelson_alerts_total', { severity: 'ok', state: 'cleared' })).toBe(1);
    expect(v('keelson_alerts_total', { severity: 'warning', state: 'raised' })).toBe(0);
    expect(v('keelson_alerts_total', { severity: 'breach', state: 'escalated' })).toBe(0);
    expect(v('keelson_open_alerts', { severity: 'breach' })).toBe(0);

    // T-2 and T-3 are live; T-3 has no reference data.
    expect(v('keelson_positions')).toBe(2);
    expect(v('keelson_unpriced_positions', { reason: 'no-reference' })).toBe(1);
    expect(v('keelson_unpriced_positions', { reason: 'no-spot' })).toBe(0);

    // Last PELICAN spot at :01, tape time :10: 9 s quiet, past the 5 s default threshold.
    expect(v('keelson_feed_staleness_seconds', { underlying: 'PELICAN' })).toBe(9);
    expect(v('keelson_stale_underlyings')).toBe(1);
    expect(v('keelson_stale_feed_events_total', { state: 'raised' })).toBe(1);

    // The engine's own count, and at least one option revaluation per PELICAN spot after T-2
    // plus the end-of-tape revalueAll.
    expect(v('keelson_revaluations_total')).toBe(engine.stats().revaluations);
    expect(v('keelson_revaluations_total')).toBeGreaterThanOrEqual(2);
    expect(v('keelson_exposure_updates_total')).toBeGreaterThan(0);

    // Utilization after the cancel = call delta / 500. Black-Scholes call delta with no dividends
    // is N(d1), d1 = (ln(S/K) + (r + sigma^2/2) tau) / (sigma sqrt(tau)) (Hull, Options, Futures and
    // Other Derivatives, ch. 19); tau ACT/365 from :10 to expiry (contract).
    const tau = (Date.parse(expiry) - Date.parse(`${T0}10Z`)) / (365 * 86_400_000);
    const [S, K, r, sigma] = [101, 100, 0.04, 0.2];
    const d1 = (Math.log(S / K) + (r + (sigma * sigma) / 2) * tau) / (sigma * Math.sqrt(tau));
    const u = v('keelson_limit_utilization', { limit_id: 'L-PELICAN-DELTA' });
    expect(u).toBeDefined();
    expect(u as number).toBeCloseTo(normalCdf(d1, 0, 1) / 500, 12);
  });
});
