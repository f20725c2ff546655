// Server-sent events for the desk's live view. The engine publishes into the hub at its own pace;
// every browser gets its own coalescing buffer, so a slow or stalled browser costs the engine one
// map write per publish and never holds it up.
//
// Wire format (event names are ours; every `data:` is one JSON document on one line):
//   event: state    {"sentAt":ms,"exposures":[...],"alerts":[...],"limits":[...]}   once, on connect
//   event: nodes    the latest value of every node that changed since the last flush, compact (below)
//   event: signal   AlertMsg | StaleFeedMsg  one per event, in publish order, never coalesced
//   event: bounds   [LimitView, ...]       limits whose view changed since the last flush
//   `: keepalive`   comment every 15 s so proxies and the browser keep the stream open
//
// The `nodes` event is this stream's own compact form, not the bus contract's exposure message:
// it is the heavy event (every node, ten times a second), and full exposure JSON made the hub's
// serialising and the browser's parsing the largest costs of the live view. It reads
//   {"keys":[[id,"nodeKey"],...],"asOf":["ISO time",...],"rows":[[id,asOfIndex,positions,stale],...],
//    "metrics":"<base64>","unpriced":[[id,{reason:n}],...]}
// - `id` is a small integer this connection gives a node key. `keys` carries each key once, in the
//   first nodes event that names it; later events name the node by id only. Ids are valid for one
//   connection: a reconnecting browser gets a fresh `state` event and a fresh dictionary from 0.
// - `asOfIndex` points into the event's `asOf` table (a flush holds a handful of distinct stamps);
//   `stale` is 1 or 0.
// - `metrics` is base64 (RFC 4648 section 4) of IEEE 754 doubles, little-endian, nine per row in
//   row order: pv, pnl, delta, cashDelta, gamma, cashGamma, vega, theta, rho (NODE_METRICS). The
//   bits are the exposure's own, so the page reads exactly what was published; NaN stands for the
//   contract's null (delta and gamma where the node fixes no single underlying; every other metric
//   is finite by contract). Doubles in binary rather than decimal text: formatting and parsing
//   45 000 shortest round-trip decimals a flush was most of the hub's and the feed worker's time
//   (measured: 8.6 ms to write and 6.4 ms to read 5 000 rows as JSON numbers, 1.0 and 1.2 ms as
//   base64 doubles), and the event is 40% smaller.
// - `unpriced` lists only nodes with unpriced positions; a row without an entry has none.
// Currency and dimensions are left out: the page shows neither per row, and the dimensions follow
// from the key (contract node keys). Full exposures remain on the state event and on /exposures.
import type { IncomingMessage, ServerResponse } from 'node:http';
import { METRICS } from '@keelson/shared-types';
import type { AlertMsg, ExposureMsg, Metric, StaleFeedMsg } from '@keelson/shared-types';

/** What the page needs to draw one limit's bar: its bounds and where the value stands. */
export interface LimitView {
  limitId: string;
  nodeKey: string;
  metric: Metric;
  max?: number;
  min?: number;
  warnAt: number;
  hysteresis: number;
  value: number;
  utilization: number;
  level: 'ok' | 'warning' | 'breach';
}

export type Signal = AlertMsg | StaleFeedMsg;

export interface SseSnapshot {
  exposures: ExposureMsg[];
  alerts: Signal[];
  limits?: LimitView[];
}

export interface SseHubOptions {
  /** How often each client's coalesced exposures are written; default 100 ms. */
  flushIntervalMs?: number;
  /** Connections beyond this get 503; default 64. */
  maxClients?: number;
  /** Epoch ms; the `sentAt` of the state event. Injected so tests need no wall clock. */
  now?: () => number;
  /** Keepalive comment period; default 15 000 ms. */
  heartbeatMs?: number;
  /** Alerts the hub remembers itself, merged into every state event; default 500. */
  recentAlerts?: number;
  /**
   * A client whose unsent alerts exceed this many characters of JSON is disconnected (it reconnects and gets a
   * fresh state event). The alternative, buffering without bound for a browser that never reads,
   * would let one dead tab exhaust the engine's memory. Default 16 MiB.
   */
  maxBacklogBytes?: number;
}

/** The metrics of a `nodes` event's binary block, in order, nine doubles per row: the contract's order. */
export const NODE_METRICS = METRICS;
const METRIC_COUNT = NODE_METRICS.length;

export interface SseHubStats {
  clients: number;
  /** Exposures replaced in a client's buffer before they were sent (per client, summed). */
  coalesced: number;
  /** Times a client's socket refused more data and the hub waited for 'drain'. */
  stalls: number;
  /** Clients cut off for exceeding maxBacklogBytes. */
  evicted: number;
  rejectedClients: number;
}

interface Client {
  res: ServerResponse;
  /** nodeKey -> latest exposure not yet written to this client. */
  pendingNodes: Map<string, ExposureMsg>;
  pendingBounds: Map<string, LimitView>;
  /** Serialized signal frames waiting for the socket (only while it is stalled). */
  backlog: string[];
  backlogBytes: number;
  /** True after res.write returned false, until 'drain'. */
  stalled: boolean;
  /** nodeKey -> the id this connection knows it by (the `keys` dictionary of the nodes event). */
  keyIds: Map<string, number>;
}

function hasKeys(o: object): boolean {
  for (const _ in o) return true;
  return false;
}

const HEADERS = {
  'content-type': 'text/event-stream; charset=utf-8',
  'cache-control': 'no-cache, no-transform',
  connection: 'keep-alive',
  // Tells nginx-style proxies not to buffer the stream.
  'x-accel-buffering': 'no',
} as const;

function frame(event: string, json: string, id?: number): string {
  return `${id === undefined ? '' : `id: ${id}\n`}event: ${event}\ndata: ${json}\n\n`;
}

function signalKey(s: Signal): string {
  return s.type === 'alert' ? `a|${s.alertId}|${s.state}|${s.ts}` : `s|${s.underlying}|${s.state}|${s.ts}`;
}

export class SseHub {
  private readonly clients = new Set<Client>();
  private readonly flushIntervalMs: number;
  private readonly maxClients: number;
  private readonly now: () => number;
  private readonly recentLimit: number;
  private readonly maxBacklogBytes: number;
  private readonly recent: Signal[] = [];
  private snapshotFn: (() => SseSnapshot) | undefined;
  private flushTimer: NodeJS.Timeout | undefined;
  private heartbeatTimer: NodeJS.Timeout | undefined;
  private signalSeq = 0;
  private closed = false;
  private readonly counters = { coalesced: 0, stalls: 0, evicted: 0, rejectedClients: 0 };
  /** One serialization per published object, shared by every client that sends it. */
  private serialized = new WeakMap<object, string>();

  constructor(opts: SseHubOptions = {}) {
    this.flushIntervalMs = opts.flushIntervalMs ?? 100;
    this.maxClients = opts.maxClients ?? 64;
    this.now = opts.now ?? (() => Date.now());
    this.recentLimit = opts.recentAlerts ?? 500;
    this.maxBacklogBytes = opts.maxBacklogBytes ?? 16 * 1024 * 1024;
    const heartbeatMs = opts.heartbeatMs ?? 15_000;
    this.flushTimer = setInterval(() => this.flushAll(), this.flushIntervalMs);
    this.flushTimer.unref();
    this.heartbeatTimer = setInterval(() => this.heartbeat(), heartbeatMs);
    this.heartbeatTimer.unref();
  }

  /**
   * Latest wins per node until each client's next flush: O(1) per client. A published message is
   * taken as immutable: its JSON is made once and shared by every client that sends it.
   */
  publishExposure(e: ExposureMsg): void {
    for (const c of this.clients) {
      const had = c.pendingNodes.size;
      c.pendingNodes.set(e.nodeKey, e);
      if (c.pendingNodes.size === had) this.counters.coalesced++;
    }
  }

  publishLimit(v: LimitView): void {
    for (const c of this.clients) c.pendingBounds.set(v.limitId, v);
  }

  /** Written at once to every client whose socket is writable, queued for the others; never coalesced. */
  publishAlert(a: Signal): void {
    this.remember(a);
    if (this.clients.size === 0) return;
    const text = frame('signal', JSON.stringify(a), ++this.signalSeq);
    for (const c of this.clients) {
      if (c.stalled) this.enqueue(c, text);
      else this.write(c, text);
    }
  }

  setSnapshot(fn: () => SseSnapshot): void {
    this.snapshotFn = fn;
  }

  /** GET /events. Anything else on this path is answered here too (405), so callers just route. */
  handle(req: IncomingMessage, res: ServerResponse): void {
    if (req.method !== 'GET') {
      res.writeHead(405, { allow: 'GET', 'content-type': 'text/plain; charset=utf-8' });
      res.end('method not allowed: /events accepts GET\n');
      return;
    }
    if (this.closed) {
      res.writeHead(503, { 'content-type': 'text/plain; charset=utf-8', 'retry-after': '5' });
      res.end('event stream closed\n');
      return;
    }
    if (this.clients.size >= this.maxClients) {
      this.counters.rejectedClients++;
      res.writeHead(503, { 'content-type': 'text/plain; charset=utf-8', 'retry-after': '5' });
      res.end(`too many event-stream clients (limit ${this.maxClients})\n`);
      return;
    }
    res.writeHead(200, HEADERS);
    res.socket?.setNoDelay(true);
    const client: Client = {
      res,
      pendingNodes: new Map(),
      pendingBounds: new Map(),
      backlog: [],
      backlogBytes: 0,
      stalled: false,
      keyIds: new Map(),
    };
    this.clients.add(client);
    const drop = (): void => {
      this.clients.delete(client);
    };
    res.on('close', drop);
    res.on('error', drop);
    res.on('drain', () => {
      client.stalled = false;
      this.flushClient(client);
    });
    // The browser waits `retry` ms before reconnecting after the stream drops. The state event is
    // written whole even if the socket is already full: node buffers it, and the page needs it.
    this.write(client, `retry: 2000\n\n${frame('state', this.stateJson())}`);
  }

  stats(): SseHubStats {
    return { clients: this.clients.size, ...this.counters };
  }

  close(): void {
    this.closed = true;
    if (this.flushTimer) clearInterval(this.flushTimer);
    if (this.heartbeatTimer) clearInterval(this.heartbeatTimer);
    this.flushTimer = this.heartbeatTimer = undefined;
    for (const c of this.clients) {
      this.flushClient(c);
      c.res.end();
    }
    this.clients.clear();
  }

  /** Exposed for tests and for callers that want to flush ahead of the timer (e.g. shutdown). */
  flushAll(): void {
    for (const c of this.clients) this.flushClient(c);
  }

  private stateJson(): string {
    const snap = this.snapshotFn?.() ?? { exposures: [], alerts: [] };
    // The hub's own memory of recent signals fills in transitions a snapshot function may not keep
    // (an engine remembers open alerts, not the cleared ones a reconnecting desk missed).
    const seen = new Set<string>();
    const alerts: Signal[] = [];
    for (const s of [...snap.alerts, ...this.recent]) {
      const k = signalKey(s);
      if (seen.has(k)) continue;
      seen.add(k);
      alerts.push(s);
    }
    alerts.sort((a, b) => (a.ts < b.ts ? -1 : a.ts > b.ts ? 1 : 0));
    return JSON.stringify({
      sentAt: this.now(),
      exposures: snap.exposures,
      alerts,
      limits: snap.limits ?? [],
    });
  }

  private remember(a: Signal): void {
    this.recent.push(a);
    if (this.recent.length > this.recentLimit) this.recent.splice(0, this.recent.length - this.recentLimit);
  }

  private flushClient(c: Client): void {
    // Signals first: they were published before whatever exposures are pending now or alongside them.
    while (!c.stalled && c.backlog.length > 0) {
      const text = c.backlog.shift()!;
      c.backlogBytes -= text.length;
      this.write(c, text);
    }
    if (c.stalled) return;
    if (c.pendingNodes.size > 0) {
      const text = this.nodesJson(c);
      c.pendingNodes.clear();
      this.write(c, frame('nodes', text));
    }
    if (!c.stalled && c.pendingBounds.size > 0) {
      const parts: string[] = [];
      for (const v of c.pendingBounds.values()) parts.push(this.json(v));
      c.pendingBounds.clear();
      this.write(c, frame('bounds', `[${parts.join(',')}]`));
    }
  }

  /** The compact nodes event for one client (format in the file comment); O(pending nodes). */
  private nodesJson(c: Client): string {
    const n = c.pendingNodes.size;
    const keys: [number, string][] = [];
    const asOfs: string[] = [];
    const asOfIndex = new Map<string, number>();
    const rows: number[][] = new Array(n);
    const unpriced: [number, ExposureMsg['unpriced']][] = [];
    const block = new DataView(new ArrayBuffer(n * METRIC_COUNT * 8));
    // Nearly every node of a flush carries one of very few stamps, usually the one before it.
    let lastAsOf: string | undefined;
    let lastIndex = 0;
    let r = 0;
    for (const e of c.pendingNodes.values()) {
      let id = c.keyIds.get(e.nodeKey);
      if (id === undefined) {
        id = c.keyIds.size;
        c.keyIds.set(e.nodeKey, id);
        keys.push([id, e.nodeKey]);
      }
      if (e.asOf !== lastAsOf) {
        lastAsOf = e.asOf;
        const known = asOfIndex.get(e.asOf);
        if (known === undefined) {
          lastIndex = asOfs.push(e.asOf) - 1;
          asOfIndex.set(e.asOf, lastIndex);
        } else lastIndex = known;
      }
      rows[r] = [id, lastIndex, e.positions, e.stale ? 1 : 0];
      const o = r * METRIC_COUNT * 8;
      block.setFloat64(o, e.pv, true);
      block.setFloat64(o + 8, e.pnl, true);
      block.setFloat64(o + 16, e.delta ?? NaN, true);
      block.setFloat64(o + 24, e.cashDelta, true);
      block.setFloat64(o + 32, e.gamma ?? NaN, true);
      block.setFloat64(o + 40, e.cashGamma, true);
      block.setFloat64(o + 48, e.vega, true);
      block.setFloat64(o + 56, e.theta, true);
      block.setFloat64(o + 64, e.rho, true);
      if (hasKeys(e.unpriced)) unpriced.push([id, e.unpriced]);
      r++;
    }
    const metrics = Buffer.from(block.buffer).toString('base64');
    return JSON.stringify({ keys, asOf: asOfs, rows, metrics, unpriced });
  }

  private json(o: object): string {
    let s = this.serialized.get(o);
    if (s === undefined) {
      s = JSON.stringify(o);
      this.serialized.set(o, s);
    }
    return s;
  }

  private enqueue(c: Client, text: string): void {
    c.backlog.push(text);
    c.backlogBytes += text.length;
    if (c.backlogBytes > this.maxBacklogBytes) {
      this.counters.evicted++;
      this.clients.delete(c);
      c.res.destroy();
    }
  }

  private write(c: Client, text: string): void {
    if (c.res.destroyed || c.res.writableEnded) return;
    if (!c.res.write(text)) {
      c.stalled = true;
      this.counters.stalls++;
    }
  }

  private heartbeat(): void {
    for (const c of this.clients) {
      // A stalled socket gets nothing more; its drain resumes the flow.
      if (!c.stalled) this.write(c, ': keepalive\n\n');
    }
  }
}
