// Builders of contract messages for the engine's tests (invented names; not part of the public API).
import { validateInput } from '@keelson/shared-types';
import type { ExposureMsg, InputMsg } from '@keelson/shared-types';
import type { RiskEngine } from './engine.ts';

export const T0 = Date.parse('2026-01-05T00:00:00.000Z');
export const DAY = 86_400_000;
export const YEAR = 365 * DAY;

export const iso = (ms: number): string => new Date(ms).toISOString();

/** Validates through the contract schemas, so every test input is a real contract message. */
export function msg(o: Record<string, unknown>): InputMsg {
  const r = validateInput(o);
  if (!r.ok) throw new Error(`test message invalid: ${r.reason}: ${JSON.stringify(o)}`);
  return r.msg;
}

export const underlying = (name: string, extra: Record<string, unknown> = {}, ts = T0): InputMsg =>
  msg({ type: 'underlying', underlying: name, kind: 'equity', currency: 'USD', ts: iso(ts), ...extra });
export const spot = (name: string, price: number, ts = T0): InputMsg =>
  msg({ type: 'spot', underlying: name, price, ts: iso(ts) });
export const flatCurve = (currency: string, rate: number, ts = T0): InputMsg =>
  msg({ type: 'curve', currency, tenors: [1], zeroRates: [rate], ts: iso(ts) });
export const flatSurface = (name: string, vol: number, ts = T0): InputMsg =>
  msg({
    type: 'vol-surface',
    underlying: name,
    expiries: ['2040-01-01T00:00:00Z'],
    strikes: [100],
    vols: [[vol]],
    ts: iso(ts),
  });

export interface TradeSpec {
  id: string;
  version?: number;
  action?: 'new' | 'amend' | 'cancel';
  desk?: string;
  book?: string;
  underlying?: string;
  right?: 'call' | 'put';
  payoff?: 'vanilla' | 'cash-digital' | 'asset-digital';
  strike?: number;
  expiryMs?: number;
  multiplier?: number;
  cashAmount?: number;
  linear?: boolean;
  quantity?: number;
  price?: number;
  ts?: number;
}

export function trade(s: TradeSpec): InputMsg {
  const ts = iso(s.ts ?? T0);
  const base = {
    type: 'trade',
    tradeId: s.id,
    version: s.version ?? 1,
    underlying: s.underlying ?? 'ACME',
    ts,
  };
  if (s.action === 'cancel') return msg({ ...base, action: 'cancel' });
  const instrument = s.linear
    ? { kind: 'linear', multiplier: s.multiplier ?? 1 }
    : {
        kind: 'option',
        right: s.right ?? 'call',
        payoff: s.payoff ?? 'vanilla',
        strike: s.strike ?? 100,
        expiry: iso(s.expiryMs ?? T0 + YEAR / 2),
        multiplier: s.multiplier ?? 1,
        ...(s.cashAmount !== undefined ? { cashAmount: s.cashAmount } : {}),
      };
  return msg({
    ...base,
    action: s.action ?? 'new',
    desk: s.desk ?? 'ORCHARD',
    book: s.book ?? 'B1',
    instrument,
    quantity: s.quantity ?? 1,
    price: s.price ?? 0,
  });
}

export const limit = (o: Record<string, unknown>, ts = T0): InputMsg =>
  msg({ type: 'limit', ts: iso(ts), ...o });

/** A market for ACME (USD equity, flat 10% curve, flat 20% vol, spot 100). */
export function acmeMarket(ts = T0): InputMsg[] {
  return [
    underlying('ACME', {}, ts),
    flatCurve('USD', 0.1, ts),
    flatSurface('ACME', 0.2, ts),
    spot('ACME', 100, ts),
  ];
}

export function feed(e: RiskEngine, msgs: readonly InputMsg[]): string[] {
  return msgs.map((m, i) => e.apply(m, `test input ${i + 1}`));
}

export function nodeOf(e: RiskEngine, key: string): ExposureMsg | undefined {
  return e.snapshot().find((x) => x.nodeKey === key);
}

export function mustNode(e: RiskEngine, key: string): ExposureMsg {
  const n = nodeOf(e, key);
  if (!n)
    throw new Error(
      `no node ${key} in snapshot: ${e
        .snapshot()
        .map((x) => x.nodeKey)
        .join(', ')}`,
    );
  return n;
}
