/**
 * Broken input of the kinds real feeds produce: cut-off JSON, a field of the wrong type or out of
 * its domain, an unknown message type. Each is built from a real message of the moment so it
 * looks like traffic, and each must be rejected by the contract's validation.
 */
import type { InputMsg } from '@keelson/shared-types';
import type { Rng } from './rng.ts';

type Breaker = (base: InputMsg, rng: Rng) => string;

const BREAKERS: Breaker[] = [
  // Cut mid-record, as a torn write or a bad framing does.
  (m, rng) => {
    const s = JSON.stringify(m);
    return s.slice(0, Math.max(1, Math.floor(s.length * rng.between(0.2, 0.9))));
  },
  (m) => JSON.stringify({ ...m, type: 'spot', price: -Math.abs(numberOr(m, 'price', 1)) }),
  (m) => JSON.stringify({ ...m, type: 'spot', price: String(numberOr(m, 'price', 1)) }),
  (m) => JSON.stringify({ ...m, ts: '2026-03-02T14:30:00+02:00' }),
  (m) => JSON.stringify({ ...m, type: 'quote' }),
  (m) => JSON.stringify({ ...m, ts: '2026-02-30T09:00:00Z' }),
  (m) =>
    JSON.stringify({
      type: 'vol-surface',
      underlying: 'underlying' in m ? m.underlying : 'HARBOR500',
      ts: m.ts,
      expiries: [m.ts],
      strikes: [100, 90],
      vols: [[0.2, 0.21]],
    }),
  (m) =>
    JSON.stringify({
      type: 'trade',
      tradeId: 'T-BROKEN',
      version: 0,
      action: 'new',
      ts: m.ts,
      desk: 'ORCHARD',
      book: 'ORCHARD-INDEX',
      underlying: 'underlying' in m ? m.underlying : 'HARBOR500',
      instrument: { kind: 'option', right: 'call', expiry: m.ts },
      quantity: 1,
      price: 1,
    }),
  (m) =>
    JSON.stringify({
      type: 'limit',
      limitId: 'LIM-BROKEN',
      scope: { desk: 'ORCHARD' },
      metric: 'gamma',
      max: 1,
      ts: m.ts,
    }),
  () => 'null',
];

function numberOr(m: InputMsg, key: string, fallback: number): number {
  const v = (m as unknown as Record<string, unknown>)[key];
  return typeof v === 'number' ? v : fallback;
}

export function malformedLine(rng: Rng, base: InputMsg): string {
  const breaker = rng.pick(BREAKERS);
  return breaker(base, rng);
}

export const MALFORMED_KINDS = BREAKERS.length;
