// The page's reader of the hub's compact `nodes` event, against the real hub: what the page decodes
// must be, number for number, what was published (the bus contract's exposure fields the page
// shows). The hub's writer is the other side of the same documented format (sse.ts file comment).
import { EventEmitter } from 'node:events';
import type { IncomingMessage, ServerResponse } from 'node:http';
import { describe, expect, it } from 'vitest';
import type { ExposureMsg } from '@keelson/shared-types';
import { NODE_METRICS, SseHub } from '@keelson/http';
import { DemoBook } from '../demo/scenario.ts';

interface Dict {
  keys: (string | undefined)[];
  reset(): void;
}
const wire = (await import('../static/js/wire.js' as string)) as {
  ROW_METRICS: string[];
  NodeDictionary: new () => Dict;
  decodeNodes(payload: unknown, dict: Dict): { list: Record<string, unknown>[]; problems: string[] };
};

/** Collects what the hub writes and splits it into events (WHATWG server-sent events framing). */
class Capture extends EventEmitter {
  text = '';
  destroyed = false;
  writableEnded = false;
  socket = undefined;
  writeHead(): this {
    return this;
  }
  write(chunk: string): boolean {
    this.text += chunk;
    return true;
  }
  end(): void {
    this.writableEnded = true;
  }
  events(): { event: string; data: string }[] {
    return this.text
      .split('\n\n')
      .filter((block) => block.includes('data: '))
      .map((block) => {
        const lines = block.split('\n');
        return {
          event: lines.find((l) => l.startsWith('event: '))?.slice(7) ?? 'message',
          data: lines.find((l) => l.startsWith('data: '))!.slice(6),
        };
      });
  }
}

const shown = (e: ExposureMsg): Record<string, unknown> => ({
  type: 'exposure',
  nodeKey: e.nodeKey,
  asOf: e.asOf,
  pv: e.pv,
  pnl: e.pnl,
  delta: e.delta,
  cashDelta: e.cashDelta,
  gamma: e.gamma,
  cashGamma: e.cashGamma,
  vega: e.vega,
  theta: e.theta,
  rho: e.rho,
  positions: e.positions,
  stale: e.stale,
  unpriced: e.unpriced,
});

function connect(hub: SseHub): Capture {
  const res = new Capture();
  hub.handle({ method: 'GET' } as IncomingMessage, res as unknown as ServerResponse);
  return res;
}

describe('compact nodes event, hub to page', () => {
  it('names the same fields in the same order on both sides', () => {
    expect(wire.ROW_METRICS).toEqual([...NODE_METRICS]);
  });

  it('decodes to exactly the exposures published, tick after tick, and again after a reconnect', () => {
    const hub = new SseHub({ flushIntervalMs: 60_000, now: () => 0 });
    const book = new DemoBook({ seed: 3 });
    book.setStale('TERN', true);
    const res = connect(hub);
    const dict = new wire.NodeDictionary();
    let seen = 0;
    const decodeNew = (r: Capture, d: Dict): Record<string, unknown>[] => {
      const events = r.events().slice(seen);
      seen += events.length;
      const out: Record<string, unknown>[] = [];
      for (const ev of events) {
        if (ev.event === 'state') d.reset();
        if (ev.event !== 'nodes') continue;
        const { list, problems } = wire.decodeNodes(JSON.parse(ev.data), d);
        expect(problems).toEqual([]);
        out.push(...list);
      }
      return out;
    };
    for (let t = 0; t < 3; t++) {
      book.tick(100);
      const published = book.exposures();
      for (const e of published) hub.publishExposure(e);
      hub.flushAll();
      expect(decodeNew(res, dict)).toEqual(published.map(shown));
    }
    // The stale underlying shows on its nodes, and only there.
    expect(
      book
        .exposures()
        .filter((e) => e.stale)
        .map((e) => e.nodeKey),
    ).toContain('underlying=TERN');

    res.emit('close');
    const again = connect(hub);
    seen = 0;
    book.tick(100);
    const published = book.exposures();
    for (const e of published) hub.publishExposure(e);
    hub.flushAll();
    // The same dictionary object, reset by the new connection's state event.
    expect(decodeNew(again, dict)).toEqual(published.map(shown));
    hub.close();
  });

  it('leaves out only the rows it cannot read, naming the field', () => {
    const dict = new wire.NodeDictionary();
    // Four rows of nine doubles: 1..36, little-endian (node's Buffer, RFC 4648 base64).
    const doubles = Buffer.alloc(4 * 9 * 8);
    for (let i = 0; i < 36; i++) doubles.writeDoubleLE(i + 1, i * 8);
    const { list, problems } = wire.decodeNodes(
      {
        keys: [[0, 'firm']],
        asOf: ['2026-03-02T14:30:00.000Z'],
        rows: [
          [0, 0, 8, 0],
          [9, 0, 8, 0],
          [0, 3, 8, 0],
          [0, 0, 1],
        ],
        metrics: doubles.toString('base64'),
        unpriced: [],
      },
      dict,
    );
    expect(list.map((e) => [e.nodeKey, e.pv, e.rho, e.positions])).toEqual([['firm', 1, 9, 8]]);
    expect(problems).toEqual([
      'nodes.rows[1][0]: id 9 was never named on this connection',
      "nodes.rows[2][1]: asOf index 3 outside the event's table of 1",
      'nodes.rows[3]: expected [id, asOfIndex, positions, stale]',
    ]);
    expect(wire.decodeNodes({ rows: 'x', asOf: [] }, dict).problems).toEqual(['nodes.rows: not an array']);
    expect(
      wire.decodeNodes({ rows: [[0, 0, 1, 0]], asOf: ['x'], metrics: doubles.toString('base64') }, dict)
        .problems,
    ).toEqual(['nodes.metrics: 288 bytes for 1 rows, expected 72']);
  });
});
