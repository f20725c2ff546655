// The process's HTTP face: Prometheus scrape, liveness and readiness for orchestrators, the
// current book as JSON for scripts, server-sent events and the board page for people.
//
// Access: with a token configured, the data endpoints (/exposures, /alerts, /events) and /metrics
// require `Authorization: Bearer <token>` (RFC 6750 section 2.1) or, for EventSource which cannot
// set headers, the `access_token` query parameter (RFC 6750 section 2.3). /metrics is guarded too
// by default when a token is set, because limit ids and underlyings are in its labels; a
// Prometheus server sends the token with `authorization: { credentials: ... }`. `guardMetrics:
// false` opens it for a scraper that cannot. /healthz and /readyz stay open: orchestrators probe
// them without credentials and they carry no positions. The board page's static files are code,
// not data, and are served openly; the data the page shows comes through /events.
import { createServer, type IncomingMessage, type Server, type ServerResponse } from 'node:http';
import { createHash, timingSafeEqual } from 'node:crypto';
import type { AddressInfo } from 'node:net';
import type { AlertMsg, ExposureMsg, StaleFeedMsg } from '@keelson/shared-types';

export interface ReadinessCheck {
  ok: boolean;
  detail?: string;
}

export interface HttpServerOptions {
  host?: string;
  port?: number;
  /** Bearer token guarding the data endpoints; unset = open (loopback default). */
  token?: string;
  /** Whether /metrics needs the token too when one is set (default true). */
  guardMetrics?: boolean;
  metrics?: { text(): Promise<string>; contentType: string };
  /** Current exposures, every node kept (RiskEngine.snapshot). */
  exposures: () => ExposureMsg[];
  /** Open alerts and the recent alert log, newest last. */
  alerts: () => { open: AlertMsg[]; recent: (AlertMsg | StaleFeedMsg)[] };
  /** Named checks; ready when every one is ok. */
  readiness: () => Record<string, ReadinessCheck>;
  /** GET /events. */
  events?: { handle(req: IncomingMessage, res: ServerResponse): void };
  /** The board's static files; returns false for paths it does not serve. */
  board?: (req: IncomingMessage, res: ServerResponse) => boolean;
  /** Epoch ms for the bodies of /healthz and /readyz. */
  now?: () => number;
  onError?: (err: unknown, path: string) => void;
}

export interface RunningHttpServer {
  server: Server;
  host: string;
  port: number;
  url: string;
  close(): Promise<void>;
}

type Route = {
  methods: readonly string[];
  guarded: boolean;
  serve: (req: IncomingMessage, res: ServerResponse, url: URL) => void | Promise<void>;
};

const JSON_TYPE = 'application/json; charset=utf-8';

function sendJson(
  res: ServerResponse,
  status: number,
  body: unknown,
  headers: Record<string, string> = {},
): void {
  const text = JSON.stringify(body);
  res.writeHead(status, {
    'content-type': JSON_TYPE,
    'cache-control': 'no-store',
    'content-length': Buffer.byteLength(text),
    ...headers,
  });
  res.end(res.req?.method === 'HEAD' ? undefined : text);
}

/** Compares digests, so neither the token's length nor its content leaks through timing. */
function tokenMatches(given: string, expected: string): boolean {
  const a = createHash('sha256').update(given).digest();
  const b = createHash('sha256').update(expected).digest();
  return timingSafeEqual(a, b);
}

function presentedToken(req: IncomingMessage, url: URL): string | null {
  const auth = req.headers.authorization;
  if (auth) {
    const m = /^Bearer\s+(\S+)\s*$/i.exec(auth);
    return m ? m[1]! : null;
  }
  return url.searchParams.get('access_token');
}

/**
 * `prefix` selects a subtree by whole dimensions: `desk=RATES` matches `desk=RATES` and
 * `desk=RATES/book=...`, never `desk=RATESX`. A raw string prefix would silently mix desks that
 * share a first few letters.
 */
export function matchesNodePrefix(nodeKey: string, prefix: string): boolean {
  return nodeKey === prefix || nodeKey.startsWith(prefix.endsWith('/') ? prefix : `${prefix}/`);
}

export function createHttpHandler(
  opts: HttpServerOptions,
): (req: IncomingMessage, res: ServerResponse) => void {
  const started = (opts.now ?? Date.now)();
  const now = opts.now ?? Date.now;
  const guardMetrics = opts.guardMetrics ?? true;
  const routes: Record<string, Route> = {
    '/healthz': {
      methods: ['GET', 'HEAD'],
      guarded: false,
      serve: (_req, res) =>
        sendJson(res, 200, { status: 'up', pid: process.pid, uptimeSeconds: (now() - started) / 1000 }),
    },
    '/readyz': {
      methods: ['GET', 'HEAD'],
      guarded: false,
      serve: (_req, res) => {
        const checks = opts.readiness();
        const ready = Object.values(checks).every((c) => c.ok);
        const notReady = Object.entries(checks)
          .filter(([, c]) => !c.ok)
          .map(([name]) => name);
        sendJson(res, ready ? 200 : 503, { ready, checks, ...(ready ? {} : { waitingFor: notReady }) });
      },
    },
    '/metrics': {
      methods: ['GET', 'HEAD'],
      guarded: guardMetrics,
      serve: async (_req, res) => {
        if (!opts.metrics) return sendJson(res, 404, { error: 'metrics are not enabled in this process' });
        const text = await opts.metrics.text();
        res.writeHead(200, { 'content-type': opts.metrics.contentType, 'cache-control': 'no-store' });
        res.end(res.req?.method === 'HEAD' ? undefined : text);
      },
    },
    '/exposures': {
      methods: ['GET', 'HEAD'],
      guarded: true,
      serve: (_req, res, url) => {
        const prefixes = url.searchParams.getAll('prefix').filter((p) => p !== '');
        let rows = opts.exposures();
        if (prefixes.length) rows = rows.filter((e) => prefixes.some((p) => matchesNodePrefix(e.nodeKey, p)));
        sendJson(res, 200, rows);
      },
    },
    '/alerts': {
      methods: ['GET', 'HEAD'],
      guarded: true,
      serve: (_req, res) => sendJson(res, 200, opts.alerts()),
    },
    '/events': {
      methods: ['GET'],
      guarded: true,
      serve: (req, res) => {
        if (!opts.events) return sendJson(res, 404, { error: 'no event stream in this process' });
        opts.events.handle(req, res);
      },
    },
  };

  return (req, res) => {
    let url: URL;
    try {
      url = new URL(req.url ?? '/', 'http://localhost');
    } catch {
      return sendJson(res, 400, { error: 'malformed request target' });
    }
    const route = routes[url.pathname];
    const method = req.method ?? 'GET';
    if (!route) {
      if ((method === 'GET' || method === 'HEAD') && opts.board?.(req, res)) return;
      return sendJson(res, 404, { error: `no such path: ${url.pathname}` });
    }
    if (!route.methods.includes(method)) {
      return sendJson(
        res,
        405,
        { error: `${method} is not allowed on ${url.pathname}` },
        { allow: route.methods.join(', ') },
      );
    }
    if (route.guarded && opts.token) {
      const given = presentedToken(req, url);
      if (given === null || !tokenMatches(given, opts.token)) {
        return sendJson(
          res,
          401,
          { error: 'a valid bearer token is required' },
          { 'www-authenticate': 'Bearer realm="keelson"' },
        );
      }
    }
    Promise.resolve()
      .then(() => route.serve(req, res, url))
      .catch((err: unknown) => {
        opts.onError?.(err, url.pathname);
        if (!res.headersSent) sendJson(res, 500, { error: 'internal error' });
        else res.destroy();
      });
  };
}

/** Listens on 127.0.0.1:9400 unless told otherwise; port 0 picks a free port. */
export async function startHttpServer(opts: HttpServerOptions): Promise<RunningHttpServer> {
  const host = opts.host ?? '127.0.0.1';
  const server = createServer(createHttpHandler(opts));
  // An SSE client holds its socket open; do not let keep-alive idling hold up close() either.
  server.keepAliveTimeout = 5_000;
  await new Promise<void>((resolve, reject) => {
    server.once('error', reject);
    server.listen(opts.port ?? 9400, host, () => {
      server.off('error', reject);
      resolve();
    });
  });
  const port = (server.address() as AddressInfo).port;
  const urlHost = host.includes(':') ? `[${host}]` : host;
  return {
    server,
    host,
    port,
    url: `http://${urlHost}:${port}`,
    close: () =>
      new Promise<void>((resolve) => {
        server.close(() => resolve());
        // Open event streams would keep close() waiting forever.
        server.closeAllConnections();
      }),
  };
}
