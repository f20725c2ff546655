import { EventEmitter } from 'node:events';
import { createServer, type IncomingMessage, type ServerResponse } from 'node:http';
import { connect as tcpConnect } from 'node:net';
import type { AddressInfo } from 'node:net';
import { afterEach, describe, expect, it, vi } from 'vitest';
import type { AlertMsg, ExposureMsg, StaleFeedMsg } from '@keelson/shared-types';
import { NODE_METRICS, SseHub, type LimitView } from './sse.ts';

// Parses a text/event-stream body by the rules of the WHATWG HTML Living Standard, section
// "Server-sent events / Interpreting an event stream": lines split on LF, a blank line dispatches,
// `field: value` with one optional leading space stripped, lines starting with ':' are comments.
interface ParsedEvent {
  event: string;
  data: string;
  id?: string;
}
function parseStream(body: string): { events: ParsedEvent[]; comments: string[]; retry?: number } {
  const events: ParsedEvent[] = [];
  const comments: string[] = [];
  let retry: number | undefined;
  let data: string[] = [];
  let event = '';
  let id: string | undefined;
  for (const line of body.split('\n')) {
    if (line === '') {
      if (data.length > 0)
        events.push({ event: event || 'message', data: data.join('\n'), ...(id ? { id } : {}) });
      data = [];
      event = '';
      continue;
    }
    if (line.startsWith(':')) {
      comments.push(line.slice(1).trim());
      continue;
    }
    const colon = line.indexOf(':');
    const field = colon < 0 ? line : line.slice(0, colon);
    let value = colon < 0 ? '' : line.slice(colon + 1);
    if (value.startsWith(' ')) value = value.slice(1);
    if (field === 'data') data.push(value);
    else if (field === 'event') event = value;
    else if (field === 'id') id = value;
    else if (field === 'retry' && /^\d+$/.test(value)) retry = Number(value);
  }
  return { events, comments, ...(retry === undefined ? {} : { retry }) };
}

/**
 * Reads `nodes` events back into exposures by the format written in sse.ts's file comment, with a
 * dictionary per connection as a browser keeps it. The metrics block is read with node's own
 * base64 decoder (RFC 4648) and Buffer.readDoubleLE, not the page's code. Only what the compact
 * event carries is compared: currency and dimensions stay on the state event.
 */
type Decoded = Pick<ExposureMsg, 'nodeKey' | 'asOf' | 'unpriced'> & Record<string, unknown>;
class NodesReader {
  keys = new Map<number, string>();
  read(data: string): Decoded[] {
    const p = JSON.parse(data) as {
      keys: [number, string][];
      asOf: string[];
      rows: [number, number, number, number][];
      metrics: string;
      unpriced: [number, Record<string, number>][];
    };
    for (const [id, key] of p.keys) {
      expect(this.keys.has(id)).toBe(false); // each key is named once per connection
      this.keys.set(id, key);
    }
    const block = Buffer.from(p.metrics, 'base64');
    expect(block.length).toBe(p.rows.length * NODE_METRICS.length * 8);
    const unpriced = new Map(p.unpriced);
    return p.rows.map((row, r) => {
      expect(row).toHaveLength(4);
      const out: Decoded = {
        nodeKey: this.keys.get(row[0])!,
        asOf: p.asOf[row[1]]!,
        unpriced: unpriced.get(row[0]) ?? {},
        positions: row[2],
        stale: row[3] === 1,
      };
      NODE_METRICS.forEach((m, i) => {
        const v = block.readDoubleLE((r * NODE_METRICS.length + i) * 8);
        out[m] = Number.isNaN(v) ? null : v;
      });
      return out;
    });
  }
}
const compactOf = (e: ExposureMsg): Decoded => {
  const out: Decoded = {
    nodeKey: e.nodeKey,
    asOf: e.asOf,
    unpriced: e.unpriced,
    positions: e.positions,
    stale: e.stale,
  };
  for (const m of NODE_METRICS) out[m] = e[m];
  return out;
};

/** A response whose socket accepts `capacity` more writes and then reports itself full. */
class FakeResponse extends EventEmitter {
  chunks: string[] = [];
  status = 0;
  headers: Record<string, string> = {};
  capacity = Infinity;
  destroyed = false;
  writableEnded = false;
  socket = undefined;
  writeHead(status: number, headers: Record<string, string>): this {
    this.status = status;
    this.headers = headers;
    return this;
  }
  write(chunk: string): boolean {
    this.chunks.push(chunk);
    this.capacity--;
    return this.capacity > 0;
  }
  end(chunk?: string): void {
    if (chunk) this.chunks.push(chunk);
    this.writableEnded = true;
  }
  destroy(): void {
    this.destroyed = true;
    this.emit('close');
  }
  /** The socket emptied: it can take `n` more writes. */
  drain(n = Infinity): void {
    this.capacity = n;
    this.emit('drain');
  }
  body(): string {
    return this.chunks.join('');
  }
  parsed(): ParsedEvent[] {
    return parseStream(this.body()).events;
  }
}

const get = { method: 'GET', url: '/events', headers: {} } as unknown as IncomingMessage;

function connect(hub: SseHub, res = new FakeResponse()): FakeResponse {
  hub.handle(get, res as unknown as ServerResponse);
  return res;
}

function exposure(nodeKey: string, pv: number): ExposureMsg {
  return {
    type: 'exposure',
    nodeKey,
    node: {},
    currency: 'USD',
    asOf: '2026-03-02T14:30:00.000Z',
    pv,
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
  } as unknown as ExposureMsg;
}

function alert(n: number, state: AlertMsg['state'], ts: string): AlertMsg {
  return {
    type: 'alert',
    alertId: `L-ORCA-VEGA#${n}`,
    limitId: 'L-ORCA-VEGA',
    nodeKey: 'desk=ORCA',
    metric: 'vega',
    value: 262_000,
    bound: 250_000,
    utilization: 1.048,
    severity: 'breach',
    previous: 'warning',
    state,
    ts,
  } as unknown as AlertMsg;
}

const hubs: SseHub[] = [];
function makeHub(opts: ConstructorParameters<typeof SseHub>[0] = {}): SseHub {
  // A long interval: these tests flush by hand so that nothing depends on timing.
  const hub = new SseHub({ flushIntervalMs: 60_000, now: () => 1_000, ...opts });
  hubs.push(hub);
  return hub;
}
afterEach(() => {
  for (const h of hubs.splice(0)) h.close();
  vi.useRealTimers();
});

describe('SseHub', () => {
  it('sends a state event with the snapshot, the reconnect delay and its own recent alerts on connect', () => {
    const hub = makeHub();
    const limit: LimitView = {
      limitId: 'L-ORCA-VEGA',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      max: 250_000,
      min: -250_000,
      warnAt: 0.8,
      hysteresis: 0.05,
      value: 100_000,
      utilization: 0.4,
      level: 'ok',
    };
    const open = alert(1, 'raised', '2026-03-02T14:30:01.000Z');
    hub.setSnapshot(() => ({ exposures: [exposure('firm', 5)], alerts: [open], limits: [limit] }));
    // Published before this client came: the hub remembers it, and the open alert is not doubled.
    hub.publishAlert(open);
    hub.publishAlert(alert(1, 'cleared', '2026-03-02T14:30:02.000Z'));

    const res = connect(hub);
    expect(res.status).toBe(200);
    expect(res.headers['content-type']).toBe('text/event-stream; charset=utf-8');
    const stream = parseStream(res.body());
    expect(stream.retry).toBe(2000);
    expect(stream.events).toHaveLength(1);
    const state = JSON.parse(stream.events[0]!.data);
    expect(stream.events[0]!.event).toBe('state');
    expect(state.sentAt).toBe(1_000);
    expect(state.exposures.map((e: ExposureMsg) => e.pv)).toEqual([5]);
    expect(state.alerts.map((a: AlertMsg) => a.state)).toEqual(['raised', 'cleared']);
    expect(state.limits).toEqual([limit]);
  });

  it('coalesces exposures per node until the flush: the latest value wins, other nodes kept', () => {
    const hub = makeHub();
    const res = connect(hub);
    hub.publishExposure(exposure('desk=ORCA', 1));
    hub.publishExposure(exposure('desk=ORCA', 2));
    hub.publishExposure(exposure('firm', 10));
    hub.publishExposure(exposure('desk=ORCA', 3));
    expect(res.parsed()).toHaveLength(1); // nothing but the state before the flush
    hub.flushAll();
    const events = res.parsed();
    expect(events).toHaveLength(2);
    expect(events[1]!.event).toBe('nodes');
    const nodes = new NodesReader().read(events[1]!.data);
    expect(nodes.map((n) => [n.nodeKey, n.pv])).toEqual([
      ['desk=ORCA', 3],
      ['firm', 10],
    ]);
    expect(hub.stats().coalesced).toBe(2);
    hub.flushAll(); // nothing new: no empty frame
    expect(res.parsed()).toHaveLength(2);
  });

  it('never coalesces alerts and writes them at once, in order, with increasing ids', () => {
    const hub = makeHub();
    const res = connect(hub);
    hub.publishAlert(alert(1, 'raised', '2026-03-02T14:30:01.000Z'));
    hub.publishAlert(alert(1, 'escalated', '2026-03-02T14:30:01.000Z'));
    const stale: StaleFeedMsg = {
      type: 'stale-feed',
      underlying: 'PELICAN',
      state: 'raised',
      lastTick: '2026-03-02T14:29:50.000Z',
      ts: '2026-03-02T14:30:01.000Z',
    } as StaleFeedMsg;
    hub.publishAlert(stale);
    const events = res.parsed().slice(1);
    expect(events.map((e) => e.event)).toEqual(['signal', 'signal', 'signal']);
    expect(events.map((e) => JSON.parse(e.data).state)).toEqual(['raised', 'escalated', 'raised']);
    expect(events.map((e) => Number(e.id))).toEqual([1, 2, 3]);
  });

  it('holds a slow client while its socket is full, keeps only the latest per node, then catches up on drain', () => {
    const hub = makeHub();
    const slow = connect(hub, Object.assign(new FakeResponse(), { capacity: 1 })); // full after the state
    const fast = connect(hub);
    for (let i = 1; i <= 1000; i++) {
      hub.publishExposure(exposure('desk=ORCA', i));
      hub.publishExposure(exposure('firm', -i));
      if (i === 500) hub.publishAlert(alert(1, 'raised', '2026-03-02T14:30:01.000Z'));
      if (i % 100 === 0) hub.flushAll();
    }
    // The fast client got the alert at once and ten flushes.
    expect(fast.parsed().filter((e) => e.event === 'nodes')).toHaveLength(10);
    // The slow one got nothing after its state: no write was attempted on a full socket.
    expect(slow.chunks).toHaveLength(1);
    expect(hub.stats().stalls).toBe(1);

    slow.drain();
    const caughtUp = slow.parsed().slice(1);
    expect(caughtUp.map((e) => e.event)).toEqual(['signal', 'nodes']);
    expect(JSON.parse(caughtUp[0]!.data).state).toBe('raised');
    const nodes = new NodesReader().read(caughtUp[1]!.data);
    expect(nodes.map((n) => [n.nodeKey, n.pv])).toEqual([
      ['desk=ORCA', 1000],
      ['firm', -1000],
    ]);
  });

  it('stops writing as soon as a drain refills the socket, and resumes on the next drain', () => {
    const hub = makeHub();
    const slow = connect(hub, Object.assign(new FakeResponse(), { capacity: 1 }));
    hub.publishAlert(alert(1, 'raised', '2026-03-02T14:30:01.000Z'));
    hub.publishAlert(alert(1, 'escalated', '2026-03-02T14:30:02.000Z'));
    hub.publishExposure(exposure('firm', 7));
    slow.drain(1); // room for exactly one write: the first alert, then full again
    expect(
      slow
        .parsed()
        .slice(1)
        .map((e) => JSON.parse(e.data).state),
    ).toEqual(['raised']);
    hub.flushAll(); // still full: nothing
    expect(slow.chunks).toHaveLength(2);
    slow.drain();
    const rest = slow.parsed().slice(2);
    expect(rest.map((e) => e.event)).toEqual(['signal', 'nodes']);
    expect(JSON.parse(rest[0]!.data).state).toBe('escalated');
  });

  it('cuts off a client whose unsent alerts pass the backlog bound rather than grow without limit', () => {
    const hub = makeHub({ maxBacklogBytes: 2_000 });
    const dead = connect(hub, Object.assign(new FakeResponse(), { capacity: 1 }));
    for (let i = 0; i < 20; i++) hub.publishAlert(alert(i, 'raised', '2026-03-02T14:30:01.000Z'));
    expect(dead.destroyed).toBe(true);
    expect(hub.stats()).toMatchObject({ clients: 0, evicted: 1 });
  });

  it('sends nodes compact: each key once with an id, then the id; every value exactly as published', () => {
    const hub = makeHub();
    const res = connect(hub);
    const reader = new NodesReader();
    // Values with full double precision, a negative zero-crossing and the contract's nulls.
    const leaf = {
      ...exposure('desk=ORCA/book=ORCA-1/underlying=PELICAN', 1234567.8901234567),
      pnl: -0.1 - 0.2,
      delta: 12_345.678901234,
      gamma: -3.0000000000000004e-7,
      cashDelta: 1e21,
      vega: -98765.4321,
      theta: -1.5e-300,
      rho: 5e-324,
      positions: 17,
      stale: true,
      unpriced: { 'no-vol': 2, 'no-spot': 1 },
    } as ExposureMsg;
    const firm = { ...exposure('firm', -42.5), asOf: '2026-03-02T14:30:00.100Z' } as ExposureMsg;
    hub.publishExposure(leaf);
    hub.publishExposure(firm);
    hub.flushAll();
    const first = res.parsed()[1]!;
    expect(first.event).toBe('nodes');
    const payload = JSON.parse(first.data);
    expect(payload.keys).toEqual([
      [0, 'desk=ORCA/book=ORCA-1/underlying=PELICAN'],
      [1, 'firm'],
    ]);
    expect(payload.asOf).toEqual(['2026-03-02T14:30:00.000Z', '2026-03-02T14:30:00.100Z']);
    expect(payload.rows).toEqual([
      [0, 0, 17, 1],
      [1, 1, 1, 0],
    ]);
    // The firm's pv, -42.5, is the tenth double: its IEEE 754 bits, little-endian (0xC045400000000000).
    expect(Buffer.from(payload.metrics, 'base64').subarray(72, 80).toString('hex')).toBe('00000000004045c0');
    expect(reader.read(first.data)).toEqual([compactOf(leaf), compactOf(firm)]);

    // Next flush: ids only, no keys; a node whose unpriced positions priced again has no entry.
    const later = { ...leaf, pv: 7, unpriced: {}, stale: false } as ExposureMsg;
    hub.publishExposure(later);
    hub.flushAll();
    const second = res.parsed()[2]!;
    expect(JSON.parse(second.data)).toMatchObject({ keys: [], unpriced: [] });
    expect(second.data).not.toContain('PELICAN');
    expect(reader.read(second.data)).toEqual([compactOf(later)]);
  });

  it('gives every connection its own dictionary, so a reconnecting page starts from a fresh state', () => {
    const hub = makeHub();
    const a = connect(hub);
    hub.publishExposure(exposure('desk=ORCA', 1));
    hub.flushAll();
    const b = connect(hub); // a reconnect is a new connection: state first, then keys from 0
    hub.publishExposure(exposure('firm', 2));
    hub.publishExposure(exposure('desk=ORCA', 3));
    hub.flushAll();
    expect(b.parsed().map((e) => e.event)).toEqual(['state', 'nodes']);
    expect(JSON.parse(b.parsed()[1]!.data).keys).toEqual([
      [0, 'firm'],
      [1, 'desk=ORCA'],
    ]);
    expect(JSON.parse(a.parsed()[2]!.data).keys).toEqual([[1, 'firm']]);
    const readA = new NodesReader();
    const fromA = a
      .parsed()
      .slice(1)
      .flatMap((e) => readA.read(e.data));
    expect(fromA.map((n) => [n.nodeKey, n.pv])).toEqual([
      ['desk=ORCA', 1],
      ['firm', 2],
      ['desk=ORCA', 3],
    ]);
  });

  it('sends limit views coalesced per limit', () => {
    const hub = makeHub();
    const res = connect(hub);
    const base: LimitView = {
      limitId: 'L-ORCA-VEGA',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      max: 250_000,
      warnAt: 0.8,
      hysteresis: 0.05,
      value: 0,
      utilization: 0,
      level: 'ok',
    };
    hub.publishLimit({ ...base, value: 100_000, utilization: 0.4 });
    hub.publishLimit({ ...base, value: 210_000, utilization: 0.84, level: 'warning' });
    hub.flushAll();
    const ev = res.parsed()[1]!;
    expect(ev.event).toBe('bounds');
    expect(JSON.parse(ev.data)).toEqual([{ ...base, value: 210_000, utilization: 0.84, level: 'warning' }]);
  });

  it('refuses clients beyond maxClients and methods other than GET', () => {
    const hub = makeHub({ maxClients: 1 });
    connect(hub);
    const second = connect(hub);
    expect(second.status).toBe(503);
    const post = new FakeResponse();
    hub.handle(
      { method: 'POST', url: '/events', headers: {} } as unknown as IncomingMessage,
      post as unknown as ServerResponse,
    );
    expect(post.status).toBe(405);
    expect(hub.stats()).toMatchObject({ clients: 1, rejectedClients: 1 });
  });

  it('writes a keepalive comment every 15 s and flushes on its own timer', () => {
    vi.useFakeTimers();
    const hub = new SseHub({ now: () => 0 });
    hubs.push(hub);
    const res = connect(hub);
    hub.publishExposure(exposure('firm', 1));
    vi.advanceTimersByTime(100);
    expect(res.parsed().map((e) => e.event)).toEqual(['state', 'nodes']);
    vi.advanceTimersByTime(14_900);
    expect(parseStream(res.body()).comments).toEqual(['keepalive']);
  });

  it('forgets a client when its connection closes', () => {
    const hub = makeHub();
    const res = connect(hub);
    expect(hub.stats().clients).toBe(1);
    res.destroy();
    hub.publishExposure(exposure('firm', 1));
    expect(hub.stats().clients).toBe(0);
  });

  it('stalls on a real socket that stops reading, buffers nothing but the latest per node, and catches up', async () => {
    const hub = makeHub();
    const server = createServer((req, res) => hub.handle(req, res));
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    const { port } = server.address() as AddressInfo;
    const sock = tcpConnect(port, '127.0.0.1');
    let received = '';
    sock.on('data', (d: Buffer) => (received += d.toString()));
    try {
      sock.write('GET /events HTTP/1.1\r\nHost: x\r\n\r\n');
      await expect.poll(() => received.includes('event: state')).toBe(true);
      sock.pause(); // the browser tab stops reading
      const big = 'x'.repeat(2_000);
      let i = 0;
      // Fill the socket and the kernel buffers until the hub sees back-pressure.
      while (hub.stats().stalls === 0 && i < 100_000) {
        for (let n = 0; n < 50; n++)
          hub.publishExposure({
            ...exposure(`desk=D${n}`, ++i),
            currency: 'USD',
            nodeKey: `desk=D${n}`,
            asOf: big,
          } as ExposureMsg);
        hub.flushAll();
        await new Promise((r) => setImmediate(r));
      }
      expect(hub.stats().stalls).toBe(1);
      const before = hub.stats().coalesced;
      for (let k = 0; k < 200; k++)
        for (let n = 0; n < 50; n++) hub.publishExposure(exposure(`desk=D${n}`, ++i));
      hub.flushAll();
      // After the first 50 (one per node) every publish replaced a pending value: the backlog is
      // 50 nodes, not 10 000 messages.
      expect(hub.stats().coalesced - before).toBe(10_000 - 50);
      sock.resume();
      // The last value of the last node arrives. Each frame is one write, so one HTTP chunk: its
      // data line stands whole in the raw bytes, and the events read in order name every key.
      const latest = (): number[] => {
        const reader = new NodesReader();
        const pvs: number[] = [];
        for (const m of received.matchAll(/event: nodes\ndata: (.*)\n\n/g))
          for (const n of reader.read(m[1]!)) pvs.push(n.pv as number);
        return pvs;
      };
      await expect.poll(() => latest().includes(i), { timeout: 10_000 }).toBe(true);
    } finally {
      sock.destroy();
      hub.close();
      await new Promise((r) => server.close(r));
    }
  });

  it('streams over a real node:http connection', async () => {
    const hub = makeHub({ flushIntervalMs: 10 });
    hub.setSnapshot(() => ({ exposures: [exposure('firm', 1)], alerts: [] }));
    const server = createServer((req, res) => hub.handle(req, res));
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    try {
      const { port } = server.address() as AddressInfo;
      const response = await fetch(`http://127.0.0.1:${port}/events`);
      expect(response.headers.get('content-type')).toBe('text/event-stream; charset=utf-8');
      const reader = response.body!.getReader();
      const decoder = new TextDecoder();
      let text = '';
      const waitFor = async (pred: () => boolean): Promise<void> => {
        while (!pred()) text += decoder.decode((await reader.read()).value, { stream: true });
      };
      await waitFor(() => text.includes('event: state'));
      hub.publishExposure(exposure('firm', 42));
      await waitFor(() => text.includes('event: nodes'));
      const nodes = parseStream(text).events.find((e) => e.event === 'nodes')!;
      expect(new NodesReader().read(nodes.data)[0]!.pv).toBe(42);
      await reader.cancel();
    } finally {
      hub.close();
      await new Promise((r) => server.close(r));
    }
  });
});
