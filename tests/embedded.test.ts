// `keelson run` as a user starts it: a separate process, the embedded default (no brokers), a free
// port. The process must become ready, serve a book whose numbers are finite, expose the keelson_
// metrics, and stop cleanly with exit code 0 on Ctrl-C (SIGINT).
import { spawn, type ChildProcess } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createRequire } from 'node:module';
import { createServer, type AddressInfo } from 'node:net';
import { PassThrough } from 'node:stream';
import type { ExposureMsg } from '@keelson/shared-types';
import { run } from '../services/cli/src/commands/run.ts';

interface Family {
  name: string;
  metrics: { value?: string; count?: string; labels?: Record<string, string> }[];
}
// A port of the Prometheus text-format parser (npm, no type declarations): an outside reader of /metrics.
const parsePrometheusTextFormat = createRequire(import.meta.url)('parse-prometheus-text-format') as (
  text: string,
) => Family[];
const bin = fileURLToPath(new URL('../services/cli/bin/keelson.js', import.meta.url));
const METRICS = ['pv', 'pnl', 'cashDelta', 'cashGamma', 'vega', 'theta', 'rho'] as const;

let child: ChildProcess;
let base = '';
let stderr = '';
let exited: Promise<{ code: number | null; signal: NodeJS.Signals | null }>;

beforeAll(async () => {
  const env = { ...process.env };
  delete env.KAFKA_BROKERS; // the embedded default, whatever the CI broker says
  delete env.KEELSON_HTTP_TOKEN;
  child = spawn(
    process.execPath,
    [bin, 'run', '--port', '0', '--duration', '300', '--underlyings', '60', '--trades', '3000', '--quiet'],
    { env, stdio: ['ignore', 'pipe', 'pipe'] },
  );
  exited = new Promise((resolve) => child.once('exit', (code, signal) => resolve({ code, signal })));
  child.stderr!.on('data', (d: Buffer) => (stderr += d.toString()));
  base = await new Promise<string>((resolve, reject) => {
    let out = '';
    const timer = setTimeout(
      () => reject(new Error(`no 'listening on' line within 60 s; stderr:\n${stderr.slice(-2000)}`)),
      60_000,
    );
    child.stdout!.on('data', (d: Buffer) => {
      out += d.toString();
      const m = /listening on (http:\/\/\S+)/.exec(out);
      if (m) {
        clearTimeout(timer);
        resolve(m[1]!);
      }
    });
    child.once('exit', (code) =>
      reject(new Error(`keelson run exited early (${code}); stderr:\n${stderr.slice(-2000)}`)),
    );
  });
}, 90_000);

afterAll(async () => {
  if (child.exitCode === null && child.signalCode === null) child.kill('SIGKILL');
});

describe('keelson run (embedded default)', () => {
  it('listens on loopback only', () => {
    expect(base).toMatch(/^http:\/\/127\.0\.0\.1:\d+$/);
  });

  it('becomes ready, saying why in JSON', async () => {
    // The server listens before the book is built; readiness is what says the state is there.
    let body: { ready?: boolean; checks?: Record<string, { ok: boolean }> } = {};
    let status = 0;
    for (let i = 0; i < 240; i++) {
      const r = await fetch(`${base}/readyz`);
      status = r.status;
      body = (await r.json()) as typeof body;
      if (status === 200) break;
      expect(status).toBe(503);
      await new Promise((res) => setTimeout(res, 250));
    }
    expect(status).toBe(200);
    expect(body.ready).toBe(true);
    expect(body.checks).toMatchObject({
      stateRebuilt: { ok: true },
      busConnected: { ok: true },
      feedRunning: { ok: true },
    });
    const health = await fetch(`${base}/healthz`);
    expect(health.status).toBe(200);
    expect(await health.json()).toMatchObject({ status: 'up' });
  }, 70_000);

  it('serves firm and desk exposures with finite numbers', async () => {
    const rows = (await (await fetch(`${base}/exposures`)).json()) as ExposureMsg[];
    const firm = rows.find((e) => e.nodeKey === 'firm');
    const desks = rows.filter((e) => e.node.desk && Object.keys(e.node).length === 1);
    expect(firm).toBeDefined();
    expect(desks.length).toBeGreaterThan(0);
    for (const e of [firm!, ...desks]) {
      for (const m of METRICS) expect(Number.isFinite(e[m]), `${e.nodeKey} ${m}`).toBe(true);
      expect(e.delta).toBeNull(); // contract: delta and gamma only on nodes that fix one underlying
      expect(e.positions).toBeGreaterThan(0);
    }
    // The firm sums its desks (contract: every position counts once in each node it belongs to).
    const deskPv = desks.reduce((s, d) => s + d.pv, 0);
    expect(Math.abs(firm!.pv - deskPv)).toBeLessThanOrEqual(1e-9 * Math.max(1, Math.abs(deskPv)));
    const one = desks[0]!.node.desk!;
    const filtered = (await (
      await fetch(`${base}/exposures?prefix=${encodeURIComponent(`desk=${one}`)}`)
    ).json()) as ExposureMsg[];
    expect(filtered.length).toBeGreaterThan(0);
    expect(filtered.every((e) => e.node.desk === one)).toBe(true);
  });

  it('exposes the keelson_ series in Prometheus text format', async () => {
    // Let the live feed run a little so the latency histogram has live ticks in it.
    await new Promise((res) => setTimeout(res, 1500));
    const r = await fetch(`${base}/metrics`);
    expect(r.status).toBe(200);
    expect(r.headers.get('content-type')).toContain('text/plain');
    const families = parsePrometheusTextFormat(await r.text());
    const byName = new Map(families.map((f) => [f.name, f]));
    for (const name of [
      'keelson_inputs_total',
      'keelson_revaluations_total',
      'keelson_tick_to_publish_seconds',
      'keelson_positions',
      'keelson_ready',
    ]) {
      expect(byName.has(name), name).toBe(true);
    }
    expect(byName.get('keelson_ready')!.metrics[0]!.value).toBe('1');
    const spotsAccepted = byName
      .get('keelson_inputs_total')!
      .metrics.find((m) => m.labels?.type === 'spot' && m.labels?.outcome === 'accepted');
    expect(Number(spotsAccepted?.value)).toBeGreaterThan(0);
    expect(Number(byName.get('keelson_tick_to_publish_seconds')!.metrics[0]!.count)).toBeGreaterThan(0);
  });

  it('/alerts is JSON with the open alerts and the recent log', async () => {
    const r = await fetch(`${base}/alerts`);
    expect(r.headers.get('content-type')).toContain('application/json');
    const body = (await r.json()) as { open: unknown[]; recent: unknown[] };
    expect(Array.isArray(body.open)).toBe(true);
    expect(Array.isArray(body.recent)).toBe(true);
  });

  it('answers 404 for unknown paths and 405 for wrong methods', async () => {
    expect((await fetch(`${base}/no-such-thing`)).status).toBe(404);
    expect((await fetch(`${base}/exposures`, { method: 'DELETE' })).status).toBe(405);
  });

  it('stops cleanly on SIGINT with exit code 0', async () => {
    child.kill('SIGINT');
    const res = await Promise.race([exited, new Promise<null>((r) => setTimeout(() => r(null), 15_000))]);
    expect(res, `did not exit within 15 s; stderr:\n${stderr.slice(-2000)}`).not.toBeNull();
    expect(res).toEqual({ code: 0, signal: null });
    // Logs are JSON lines on stderr, the last one the clean stop.
    const lines = stderr
      .trim()
      .split('\n')
      .filter((l) => l.startsWith('{'));
    expect(lines.length).toBeGreaterThan(0);
    expect(JSON.parse(lines.at(-1)!)).toMatchObject({ msg: 'stopped' });
  }, 20_000);
});

describe('keelson run: refusing bad configuration', () => {
  function io() {
    let out = '';
    let err = '';
    const stdout = new PassThrough();
    const stderr = new PassThrough();
    stdout.on('data', (d: Buffer) => (out += d.toString()));
    stderr.on('data', (d: Buffer) => (err += d.toString()));
    return { io: { stdin: new PassThrough(), stdout, stderr }, out: () => out, err: () => err };
  }

  it.each([
    [['--port', '70000'], "--port must be <= 65535, got '70000'"],
    [['--speed=-2'], "--speed must be a number > 0, got '-2'"],
    [['--duration', 'soon'], "--duration must be a number > 0, got 'soon'"],
    [['--reporting-currency', 'usd'], "--reporting-currency must be three upper-case letters, got 'usd'"],
    [['--no-such-option'], "Unknown option '--no-such-option'"],
  ])('%j exits 1 naming the option', async (argv, message) => {
    const t = io();
    const prev = process.env.KAFKA_BROKERS;
    delete process.env.KAFKA_BROKERS;
    try {
      expect(await run(argv, t.io)).toBe(1);
    } finally {
      if (prev !== undefined) process.env.KAFKA_BROKERS = prev;
    }
    expect(t.err()).toContain(message);
  });

  it('exits 1 with a clear message when the port is taken', async () => {
    const blocker = createServer();
    await new Promise<void>((r) => blocker.listen(0, '127.0.0.1', () => r()));
    const port = (blocker.address() as AddressInfo).port;
    const t = io();
    const prev = process.env.KAFKA_BROKERS;
    delete process.env.KAFKA_BROKERS;
    try {
      expect(await run(['--port', String(port), '--quiet', '--log-level', 'silent'], t.io)).toBe(1);
    } finally {
      if (prev !== undefined) process.env.KAFKA_BROKERS = prev;
      blocker.close();
    }
    expect(t.err()).toContain(`127.0.0.1:${port} is already in use (try --port 0)`);
  });
});
