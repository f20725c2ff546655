import { afterEach, describe, expect, it } from 'vitest';
import type { ExposureMsg } from '@keelson/shared-types';
import {
  matchesNodePrefix,
  startHttpServer,
  type HttpServerOptions,
  type RunningHttpServer,
} from './server.ts';

const ex = (nodeKey: string): ExposureMsg => ({
  type: 'exposure',
  nodeKey,
  node: {},
  currency: 'USD',
  asOf: '2026-03-02T14:30:00Z',
  pv: 1,
  pnl: 0,
  delta: null,
  cashDelta: 0,
  gamma: null,
  cashGamma: 0,
  vega: 0,
  theta: 0,
  rho: 0,
  positions: 1,
  unpriced: {},
  stale: false,
});

let running: RunningHttpServer | null = null;
afterEach(async () => {
  await running?.close();
  running = null;
});

async function start(extra: Partial<HttpServerOptions> = {}) {
  let ready = false;
  running = await startHttpServer({
    port: 0,
    exposures: () => [ex('firm'), ex('desk=RATES'), ex('desk=RATES/book=R1'), ex('desk=RATESX')],
    alerts: () => ({ open: [], recent: [] }),
    readiness: () => ({
      stateRebuilt: { ok: ready, detail: ready ? 'bootstrap applied' : 'applying bootstrap' },
      busConnected: { ok: true },
    }),
    metrics: { text: async () => 'keelson_up 1\n', contentType: 'text/plain; version=0.0.4; charset=utf-8' },
    board: (req, res) => {
      if (req.url !== '/') return false;
      res.end('<!doctype html><title>board</title>');
      return true;
    },
    ...extra,
  });
  return { base: running.url, setReady: (b: boolean) => (ready = b) };
}

describe('HTTP server', () => {
  it('listens on loopback by default and answers /healthz', async () => {
    const { base } = await start();
    expect(running!.host).toBe('127.0.0.1');
    const r = await fetch(`${base}/healthz`);
    expect(r.status).toBe(200);
    expect(await r.json()).toMatchObject({ status: 'up' });
  });

  it('/readyz is 503 naming what it waits for, then 200', async () => {
    const { base, setReady } = await start();
    let r = await fetch(`${base}/readyz`);
    expect(r.status).toBe(503);
    expect(await r.json()).toMatchObject({
      ready: false,
      waitingFor: ['stateRebuilt'],
      checks: { stateRebuilt: { detail: 'applying bootstrap' } },
    });
    setReady(true);
    r = await fetch(`${base}/readyz`);
    expect(r.status).toBe(200);
    expect(await r.json()).toMatchObject({ ready: true });
  });

  it('/exposures filters by whole node dimensions', async () => {
    const { base } = await start();
    const all = (await (await fetch(`${base}/exposures`)).json()) as ExposureMsg[];
    expect(all).toHaveLength(4);
    const rates = (await (await fetch(`${base}/exposures?prefix=desk=RATES`)).json()) as ExposureMsg[];
    expect(rates.map((e) => e.nodeKey)).toEqual(['desk=RATES', 'desk=RATES/book=R1']);
    expect(matchesNodePrefix('desk=A/book=B', 'desk=A/')).toBe(true);
  });

  it('serves Prometheus text, the board page, 404 and 405', async () => {
    const { base } = await start();
    const m = await fetch(`${base}/metrics`);
    expect(m.headers.get('content-type')).toContain('text/plain');
    expect(await m.text()).toBe('keelson_up 1\n');
    expect(await (await fetch(`${base}/`)).text()).toContain('<title>board</title>');
    const nf = await fetch(`${base}/nope`);
    expect(nf.status).toBe(404);
    expect(await nf.json()).toEqual({ error: 'no such path: /nope' });
    const na = await fetch(`${base}/exposures`, { method: 'POST' });
    expect(na.status).toBe(405);
    expect(na.headers.get('allow')).toBe('GET, HEAD');
  });

  it('guards data endpoints and /metrics with the token, never the probes', async () => {
    const { base } = await start({ token: 's3cret' });
    expect((await fetch(`${base}/exposures`)).status).toBe(401);
    expect((await fetch(`${base}/exposures`, { headers: { authorization: 'Bearer wrong' } })).status).toBe(
      401,
    );
    expect((await fetch(`${base}/exposures`, { headers: { authorization: 'Bearer s3cret' } })).status).toBe(
      200,
    );
    expect((await fetch(`${base}/alerts?access_token=s3cret`)).status).toBe(200);
    expect((await fetch(`${base}/metrics`)).status).toBe(401);
    expect((await fetch(`${base}/healthz`)).status).toBe(200);
    expect((await fetch(`${base}/readyz`)).status).toBe(503);
    const r = await fetch(`${base}/alerts`);
    expect(r.headers.get('www-authenticate')).toBe('Bearer realm="keelson"');
  });

  it('can leave /metrics open for a scraper without credentials', async () => {
    const { base } = await start({ token: 's3cret', guardMetrics: false });
    expect((await fetch(`${base}/metrics`)).status).toBe(200);
    expect((await fetch(`${base}/exposures`)).status).toBe(401);
  });

  it('turns a failing source into a 500 without taking the server down', async () => {
    const errors: string[] = [];
    const { base } = await start({
      alerts: () => {
        throw new Error('broken');
      },
      onError: (e, p) => errors.push(`${p} ${String(e)}`),
    });
    expect((await fetch(`${base}/alerts`)).status).toBe(500);
    expect(errors).toEqual(['/alerts Error: broken']);
    expect((await fetch(`${base}/healthz`)).status).toBe(200);
  });
});
