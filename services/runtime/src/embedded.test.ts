import { afterEach, describe, expect, it } from 'vitest';
import { pino } from 'pino';
import type { ExposureMsg, InputMsg } from '@keelson/shared-types';
import { startEmbedded, type EmbeddedRuntime } from './embedded.ts';
import type { MarketSource } from './feeder.ts';

const YEAR = 365 * 86_400_000;
const iso = (ms: number) => new Date(ms).toISOString();

// Hull, Options, Futures and Other Derivatives (Black-Scholes-Merton worked example): S = 42,
// K = 40, r = 10%, sigma = 20%, T = 0.5 years, no dividends: call = 4.76. One position of one
// unit reproduces it through the whole embedded pipeline (bus, runner, engine, HTTP).
// Live mode values at the wall clock, so the book is built around the moment the test runs; the
// few milliseconds between booking and valuation move the value by far less than the 0.005 checked.
class HullSource implements MarketSource {
  steps = 0;
  readonly start = Date.now();
  bootstrap(): InputMsg[] {
    const START = this.start;
    const ts = iso(START);
    return [
      { type: 'underlying', underlying: 'ORCHID', kind: 'equity', currency: 'USD', dividendYield: 0, ts },
      { type: 'curve', currency: 'USD', ts, tenors: [0.5], zeroRates: [0.1] },
      {
        type: 'vol-surface',
        underlying: 'ORCHID',
        ts,
        expiries: [iso(START + YEAR)],
        strikes: [40],
        vols: [[0.2]],
      },
      { type: 'spot', underlying: 'ORCHID', price: 42, ts },
      {
        type: 'trade',
        tradeId: 'T-1',
        version: 1,
        action: 'new',
        ts,
        desk: 'HARBOUR',
        book: 'H-1',
        underlying: 'ORCHID',
        instrument: {
          kind: 'option',
          right: 'call',
          payoff: 'vanilla',
          strike: 40,
          expiry: iso(START + YEAR / 2),
          multiplier: 1,
        },
        quantity: 1,
        price: 4,
      },
      {
        type: 'limit',
        limitId: 'L-HARBOUR-PV',
        scope: { desk: 'HARBOUR' },
        metric: 'pv',
        max: 4,
        warnAt: 0.8,
        hysteresis: 0.05,
        ts,
      },
    ] as InputMsg[];
  }
  step(nowMs: number) {
    this.steps++;
    return {
      messages: [{ type: 'spot', underlying: 'ORCHID', price: 42, ts: iso(nowMs) }] as InputMsg[],
      malformed:
        this.steps === 1 ? [`{"type":"spot","underlying":"ORCHID","price":-1,"ts":"${iso(nowMs)}"}`] : [],
    };
  }
}

let rt: EmbeddedRuntime | null = null;
afterEach(async () => {
  await rt?.stop();
  rt = null;
});

describe('embedded runtime', () => {
  it('serves the engine over HTTP: Hull call value, the pv limit breach, metrics and readiness', async () => {
    const source = new HullSource();
    rt = await startEmbedded({ port: 0, logger: pino({ level: 'silent' }), source, stepMs: 10 });
    const base = rt.url;
    const ready = await fetch(`${base}/readyz`);
    expect(ready.status).toBe(200);
    expect(await ready.json()).toMatchObject({
      ready: true,
      checks: { stateRebuilt: { ok: true, detail: 'bootstrap of 6 inputs applied' } },
    });

    const rows = (await (await fetch(`${base}/exposures?prefix=desk=HARBOUR`)).json()) as ExposureMsg[];
    const desk = rows.find((e) => e.nodeKey === 'desk=HARBOUR')!;
    expect(desk.pv).toBeCloseTo(4.76, 2);
    expect(desk.pnl).toBeCloseTo(0.76, 2);
    expect(rows.every((e) => e.nodeKey.startsWith('desk=HARBOUR'))).toBe(true);

    // pv 4.76 against max 4: utilization 1.19, a breach raised from ok.
    const alerts = (await (await fetch(`${base}/alerts`)).json()) as {
      open: { limitId: string; severity: string }[];
      recent: unknown[];
    };
    expect(alerts.open).toMatchObject([{ limitId: 'L-HARBOUR-PV', severity: 'breach' }]);
    expect(alerts.recent).toHaveLength(1);

    // Wait for the feed to step: the malformed spot goes to the dead letter topic, counted as rejected.
    for (let i = 0; i < 100 && rt.runner.stats().rejected === 0; i++)
      await new Promise((r) => setTimeout(r, 10));
    expect(rt.runner.stats().rejected).toBe(1);
    const metrics = await (await fetch(`${base}/metrics`)).text();
    expect(metrics).toMatch(/keelson_inputs_total\{type="spot",outcome="rejected"\} 1/);
    expect(metrics).toMatch(/keelson_ready 1/);
  });
});
