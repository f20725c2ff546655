/**
 * The simulator's output against the contract: everything it emits as valid passes the
 * shared-types schemas unchanged, everything it emits as malformed is rejected, and the trade
 * flow obeys the contract's lifecycle rules (/work/shared/contract-v1.md, `trade`).
 */
import {
  decodeInput,
  inputKey,
  parseTs,
  validateInput,
  type InputMsg,
  type TradeMsg,
} from '@keelson/shared-types';
import { describe, expect, it } from 'vitest';
import { MarketSim, type SimOptions } from './sim.ts';

const START = Date.UTC(2026, 2, 2, 14, 30);
const SMALL: SimOptions = { seed: 11, startMs: START, underlyings: 60, trades: 3000 };

function run(sim: MarketSim, seconds: number, stepMs = 1000, from = START) {
  const messages: InputMsg[] = [];
  const malformed: string[] = [];
  const end = from + seconds * 1000;
  for (let t = from + stepMs; ; t += stepMs) {
    const r = sim.step(Math.min(t, end));
    messages.push(...r.messages);
    malformed.push(...r.malformed);
    if (t >= end) break;
  }
  return { messages, malformed };
}

/** Valid, and already in the parsed (canonical) form: JSON round trip then validation changes nothing. */
function expectCanonical(messages: readonly InputMsg[]) {
  for (const m of messages) {
    const r = validateInput(JSON.parse(JSON.stringify(m)));
    if (!r.ok) throw new Error(`${r.reason} in ${JSON.stringify(m).slice(0, 300)}`);
    // String comparison first: toEqual over a few hundred thousand messages is slow.
    if (JSON.stringify(r.msg) !== JSON.stringify(m)) expect(r.msg).toEqual(m);
  }
}

describe('MarketSim output is contract-valid', () => {
  it('bootstrap at the default size: refdata, curves, spots, surfaces, 20000 trades, limits', () => {
    const sim = new MarketSim({ seed: 3, startMs: START });
    const boot = sim.bootstrap();
    const count = (type: string) => boot.filter((m) => m.type === type).length;
    expect(count('underlying')).toBe(300);
    expect(count('spot')).toBe(300);
    expect(count('vol-surface')).toBe(300);
    expect(count('curve')).toBe(5);
    expect(count('trade')).toBe(20_000);
    expect(count('limit')).toBeGreaterThan(300);
    expectCanonical(boot);
    // Every message of the bootstrap is stamped at the start.
    expect(new Set(boot.map((m) => m.ts))).toEqual(new Set(['2026-03-02T14:30:00.000Z']));
  });

  it('everything a step emits is valid, over ten simulated minutes', () => {
    const sim = new MarketSim(SMALL);
    const { messages, malformed } = run(sim, 600);
    expectCanonical(messages);
    const types = new Set(messages.map((m) => (m.type === 'trade' ? `trade-${m.action}` : m.type)));
    for (const t of ['spot', 'vol-surface', 'curve', 'trade-new', 'trade-amend', 'trade-cancel'])
      expect(types).toContain(t);
    expect(malformed.length).toBeGreaterThan(5);
  });

  it('every malformed line is rejected, of every kind', () => {
    const sim = new MarketSim({ ...SMALL, malformedPerMinute: 120 });
    const { malformed } = run(sim, 300);
    expect(malformed.length).toBeGreaterThan(400);
    const reasons = new Set<string>();
    for (const line of malformed) {
      const r = decodeInput(line);
      expect(r.ok, line).toBe(false);
      if (!r.ok) reasons.add(r.reason.replace(/:.*$|\[\d+\]|\(.*\)/g, '').split(' ')[0] ?? '');
    }
    // bad JSON, bad spot price, bad ts, unknown type, bad surface, bad trade, bad limit, not an object
    expect(reasons.size).toBeGreaterThanOrEqual(7);
  });

  it('covers the contract: every spot and trade has reference data, every currency a curve and an FX route to USD', () => {
    const boot = new MarketSim(SMALL).bootstrap();
    const names = new Set(boot.flatMap((m) => (m.type === 'underlying' ? [m.underlying] : [])));
    const ccys = new Set(boot.flatMap((m) => (m.type === 'underlying' ? [m.currency] : [])));
    const curves = new Set(boot.flatMap((m) => (m.type === 'curve' ? [m.currency] : [])));
    for (const m of boot)
      if (m.type === 'spot' || m.type === 'trade' || m.type === 'vol-surface')
        expect(names).toContain(m.underlying);
    for (const c of ccys) {
      expect(curves).toContain(c);
      if (c !== 'USD') expect(names.has(`${c}USD`) || names.has(`USD${c}`), c).toBe(true);
    }
    expect([...ccys].sort()).toEqual(['CHF', 'EUR', 'GBP', 'JPY', 'USD']);
  });
});

describe('determinism', () => {
  it('the same seed gives the same feed; another seed another', () => {
    const a = run(new MarketSim(SMALL), 60);
    const b = run(new MarketSim(SMALL), 60);
    expect(JSON.stringify(b)).toBe(JSON.stringify(a));
    expect(JSON.stringify(new MarketSim(SMALL).bootstrap())).toBe(
      JSON.stringify(new MarketSim(SMALL).bootstrap()),
    );
    const c = run(new MarketSim({ ...SMALL, seed: 12 }), 60);
    expect(JSON.stringify(c)).not.toBe(JSON.stringify(a));
  });

  it('does not depend on how time is sliced into steps', () => {
    const coarse = run(new MarketSim(SMALL), 120, 5000);
    const fine = run(new MarketSim(SMALL), 120, 137);
    const uneven = new MarketSim(SMALL);
    const parts = [
      START + 1,
      START + 999,
      START + 40_000,
      START + 40_000,
      START + 119_999,
      START + 120_000,
    ].map((t) => uneven.step(t));
    expect(JSON.stringify(fine.messages)).toBe(JSON.stringify(coarse.messages));
    expect(JSON.stringify(parts.flatMap((p) => p.messages))).toBe(JSON.stringify(coarse.messages));
    expect(fine.malformed).toEqual(coarse.malformed);
  });

  it('a step that does not move time forward emits nothing', () => {
    const sim = new MarketSim(SMALL);
    sim.step(START + 5000);
    expect(sim.step(START + 5000)).toEqual({ messages: [], malformed: [] });
    expect(sim.step(START + 1000)).toEqual({ messages: [], malformed: [] });
  });

  it('refuses nonsensical options with the option named', () => {
    expect(() => new MarketSim({ startMs: Number.NaN })).toThrow('SimOptions.startMs');
    expect(() => new MarketSim({ startMs: START, tickIntervalMs: 0 })).toThrow(
      'SimOptions.tickIntervalMs must be > 0',
    );
    expect(() => new MarketSim({ startMs: START, amendShare: 0.7, cancelShare: 0.5 })).toThrow(
      'amendShare + cancelShare',
    );
    expect(() => new MarketSim({ startMs: START, marketLoading: 0.8, sectorLoading: 0.7 })).toThrow(
      'marketLoading',
    );
  });
});

describe('timing of the feed', () => {
  it('stamps each message inside its step, in time order (a duplicate keeps its original ts)', () => {
    const sim = new MarketSim(SMALL);
    sim.bootstrap();
    let prev = START;
    const seen = new Set<string>();
    let resends = 0;
    for (let t = START + 700; t <= START + 180_000; t += 700) {
      const { messages } = sim.step(t);
      let last = prev;
      for (const m of messages) {
        const ms = parseTs(m.ts);
        const key = JSON.stringify(m);
        if (m.type === 'trade' && seen.has(key)) {
          resends++;
        } else {
          expect(ms).toBeGreaterThan(prev);
          expect(ms).toBeLessThanOrEqual(t);
          expect(ms).toBeGreaterThanOrEqual(last);
          last = ms;
        }
        seen.add(key);
      }
      prev = t;
    }
    expect(resends).toBeGreaterThan(0);
  });

  it('every feed ticks at least once per heartbeat, except during an outage', () => {
    const sim = new MarketSim({ ...SMALL, outagesPerHour: 0, heartbeatMs: 2000 });
    const { messages } = run(sim, 120, 1000);
    const last = new Map<string, number>();
    let worst = 0;
    for (const m of messages) {
      if (m.type !== 'spot') continue;
      const t = parseTs(m.ts);
      worst = Math.max(worst, t - (last.get(m.underlying) ?? START));
      last.set(m.underlying, t);
    }
    expect(worst).toBeLessThanOrEqual(2000);
    expect(last.size).toBe(60);
  });

  it('an outage silences a feed for longer than the contract default staleness (5 s)', () => {
    const sim = new MarketSim({ ...SMALL, outagesPerHour: 120, outageMs: 12_000 });
    const { messages } = run(sim, 600, 1000);
    const last = new Map<string, number>();
    let worst = 0;
    for (const m of messages) {
      if (m.type !== 'spot') continue;
      const t = parseTs(m.ts);
      worst = Math.max(worst, t - (last.get(m.underlying) ?? START));
      last.set(m.underlying, t);
    }
    expect(worst).toBeGreaterThan(10_000);
  });
});

describe('trade flow follows the contract lifecycle', () => {
  it('versions rise per trade, duplicates resend the same version, nothing follows a cancel, amends keep the underlying', () => {
    const sim = new MarketSim({ ...SMALL, tradesPerMinute: 600, duplicateShare: 0.1 });
    const boot = sim.bootstrap();
    const { messages } = run(sim, 600);
    const trades = [...boot, ...messages].filter((m): m is TradeMsg => m.type === 'trade');
    const version = new Map<string, number>();
    const underlying = new Map<string, string>();
    const cancelled = new Set<string>();
    const sent = new Set<string>();
    let duplicates = 0;
    let amends = 0;
    let cancels = 0;
    for (const t of trades) {
      const seen = version.get(t.tradeId);
      if (seen !== undefined && t.version <= seen) {
        // A duplicate (same version) or a stale one (lower, overtaken by an amend) is an exact
        // resend of an event already sent.
        expect(sent.has(JSON.stringify(t))).toBe(true);
        duplicates++;
        continue;
      }
      expect(cancelled.has(t.tradeId), `${t.tradeId} after its cancel`).toBe(false);
      if (seen === undefined) {
        expect(t.action).toBe('new');
        expect(t.version).toBe(1);
      } else {
        expect(t.version).toBe(seen + 1);
        expect(t.underlying).toBe(underlying.get(t.tradeId));
      }
      if (t.action === 'amend') amends++;
      if (t.action === 'cancel') {
        cancels++;
        cancelled.add(t.tradeId);
      }
      version.set(t.tradeId, t.version);
      underlying.set(t.tradeId, t.underlying);
      sent.add(JSON.stringify(t));
      expect(inputKey(t)).toBe(t.underlying);
    }
    // 600 events a minute for 10 minutes: about 6000, 15% amends, 8% cancels, 10% resent.
    expect(amends).toBeGreaterThan(600);
    expect(cancels).toBeGreaterThan(300);
    expect(duplicates).toBeGreaterThan(350);
    expect(sim.liveTrades()).toBe(version.size - cancelled.size);
  });

  it('books trades only in the invented desks and their books', () => {
    const sim = new MarketSim(SMALL);
    const desks = new Map(sim.universe().desks.map((d) => [d.desk, new Set(d.books)]));
    for (const m of sim.bootstrap()) {
      if (m.type !== 'trade' || m.action === 'cancel') continue;
      expect(desks.get(m.desk)?.has(m.book), `${m.desk}/${m.book}`).toBe(true);
      if (m.instrument.kind === 'option') expect(parseTs(m.instrument.expiry)).toBeGreaterThan(START);
    }
  });
});
