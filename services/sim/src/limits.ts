/**
 * Limits for the invented book, sized against the book itself so that the day tests them: most
 * sit comfortably, some close to their warning level and a few at or past their bound, so that
 * warnings and breaches show up within minutes of a demo starting.
 */
import {
  formatTs,
  tenorBucket,
  type LimitMsg,
  type Metric,
  type TradeBookingMsg,
} from '@keelson/shared-types';
import type { Market } from './market.ts';
import { optionGreeks } from './pricing.ts';
import type { Rng } from './rng.ts';
import type { SimUnderlying } from './universe.ts';

/** One position's contributions, in the units the contract publishes. */
export interface Contribution {
  pv: number;
  delta: number;
  gamma: number;
  cashDelta: number;
  vega: number;
}

/** Approximate exposures of one trade (the engine's exact figures will differ a little). */
export function contribution(market: Market, t: TradeBookingMsg, nowMs: number): Contribution {
  const i = market.indexOf.get(t.underlying);
  if (i === undefined) throw new Error(`unknown underlying ${t.underlying}`);
  const u = market.universe[i] as SimUnderlying;
  const spot = market.spot(i);
  const fx = market.toUsd(u.currency);
  const size = t.quantity * t.instrument.multiplier;
  if (t.instrument.kind === 'linear') {
    const pv = u.simKind === 'future' ? size * (spot - t.price) : size * spot;
    return { pv: pv * fx, delta: size, gamma: 0, cashDelta: size * spot * fx, vega: 0 };
  }
  const ins = t.instrument;
  const g = optionGreeks({
    right: ins.right,
    payoff: ins.payoff,
    cashAmount: ins.cashAmount,
    ...market.quoteInputs(i, ins.strike, Date.parse(ins.expiry), nowMs),
  });
  return {
    pv: size * g.price * fx,
    delta: size * g.delta,
    gamma: size * g.gamma,
    cashDelta: size * g.delta * spot * fx,
    vega: size * g.vega * fx,
  };
}

interface Scope {
  desk?: string;
  book?: string;
  underlying?: string;
  tenor?: LimitMsg['scope']['tenor'];
}

interface Tally {
  id: string;
  scope: Scope;
  metric: Metric;
  value: number;
  /** sum of the absolute contributions: how much activity the net figure hides */
  gross: number;
}

/**
 * A bound is never set below this share of the scope's gross exposure, as a risk manager
 * would not set a limit that one ordinary ticket could blow through.
 */
const MIN_BOUND_OF_GROSS = 0.3;

/** Three significant figures: limits are set in round numbers. */
function roundBound(x: number): number {
  if (x === 0) return 0;
  const p = 10 ** (Math.floor(Math.log10(Math.abs(x))) - 2);
  return Math.round(x / p) * p;
}

/**
 * The target utilization of a limit: mostly comfortable, some near the warning level, a few at
 * the bound. Drawn per limit from the seeded stream.
 */
function targetUtilization(rng: Rng): number {
  const r = rng.uniform();
  if (r < 0.68) return rng.between(0.25, 0.6);
  if (r < 0.88) return rng.between(0.6, 0.78);
  if (r < 0.97) return rng.between(0.78, 0.97);
  return rng.between(1.0, 1.08);
}

export function sizeLimits(
  rng: Rng,
  market: Market,
  trades: Iterable<TradeBookingMsg>,
  nowMs: number,
): LimitMsg[] {
  const tallies = new Map<string, Tally>();
  const add = (id: string, scope: Scope, metric: Metric, value: number) => {
    const t = tallies.get(id);
    if (t) {
      t.value += value;
      t.gross += Math.abs(value);
    } else tallies.set(id, { id, scope, metric, value, gross: Math.abs(value) });
  };
  for (const t of trades) {
    const c = contribution(market, t, nowMs);
    const u = t.underlying;
    add(`LIM-${u}-DELTA`, { underlying: u }, 'delta', c.delta);
    if (t.instrument.kind === 'option') {
      add(`LIM-${u}-GAMMA`, { underlying: u }, 'gamma', c.gamma);
      const tenor = tenorBucket(Date.parse(t.instrument.expiry), nowMs);
      add(`LIM-${t.desk}-${tenor}-VEGA`, { desk: t.desk, tenor }, 'vega', c.vega);
      add(`LIM-${t.desk}-VEGA`, { desk: t.desk }, 'vega', c.vega);
      add('LIM-FIRM-VEGA', {}, 'vega', c.vega);
    }
    add(`LIM-${t.book}-PV`, { desk: t.desk, book: t.book }, 'pv', c.pv);
    add(`LIM-${t.book}-CASHDELTA`, { desk: t.desk, book: t.book }, 'cashDelta', c.cashDelta);
    add('LIM-FIRM-CASHDELTA', {}, 'cashDelta', c.cashDelta);
  }
  const ts = formatTs(nowMs);
  const out: LimitMsg[] = [];
  for (const t of [...tallies.values()].sort((a, b) => (a.id < b.id ? -1 : a.id > b.id ? 1 : 0))) {
    // A scope whose exposure is (numerically) nil gets no limit: there is nothing to size it on.
    if (!(Math.abs(t.value) > 1e-9)) continue;
    const bound = roundBound(
      Math.max(Math.abs(t.value) / targetUtilization(rng), MIN_BOUND_OF_GROSS * t.gross),
    );
    if (!(bound > 0)) continue;
    out.push({
      type: 'limit',
      limitId: t.id,
      scope: t.scope,
      metric: t.metric,
      max: bound,
      min: -bound,
      warnAt: 0.8,
      hysteresis: 0.05,
      ts,
    });
  }
  return out;
}

/** The contract's utilization: value / max when value >= 0 and max is set, value / min when below 0 and min is set. */
export function utilization(value: number, limit: Pick<LimitMsg, 'max' | 'min'>): number {
  if (value >= 0 && limit.max !== undefined) return value / limit.max;
  if (value < 0 && limit.min !== undefined) return value / limit.min;
  return 0;
}

function inScope(scope: LimitMsg['scope'], t: TradeBookingMsg, nowMs: number): boolean {
  if (scope.desk !== undefined && scope.desk !== t.desk) return false;
  if (scope.book !== undefined && scope.book !== t.book) return false;
  if (scope.underlying !== undefined && scope.underlying !== t.underlying) return false;
  if (scope.tenor !== undefined) {
    if (t.instrument.kind !== 'option') return false;
    if (tenorBucket(Date.parse(t.instrument.expiry), nowMs) !== scope.tenor) return false;
  }
  return true;
}

/** The simulator's own estimate of each limit's utilization over the given live trades. */
export function estimateUtilizations(
  market: Market,
  trades: Iterable<TradeBookingMsg>,
  limits: readonly LimitMsg[],
  nowMs: number,
): Map<string, number> {
  // Index the positions by the dimension a limit names first, so each limit visits only its own.
  const all: { t: TradeBookingMsg; c: Contribution }[] = [];
  const by = new Map<string, { t: TradeBookingMsg; c: Contribution }[]>();
  const push = (key: string, item: { t: TradeBookingMsg; c: Contribution }) => {
    const list = by.get(key);
    if (list) list.push(item);
    else by.set(key, [item]);
  };
  for (const t of trades) {
    const item = { t, c: contribution(market, t, nowMs) };
    all.push(item);
    push(`u:${t.underlying}`, item);
    push(`d:${t.desk}`, item);
  }
  const out = new Map<string, number>();
  for (const l of limits) {
    const candidates =
      l.scope.underlying !== undefined
        ? (by.get(`u:${l.scope.underlying}`) ?? [])
        : l.scope.desk !== undefined
          ? (by.get(`d:${l.scope.desk}`) ?? [])
          : all;
    let v = 0;
    for (const { t, c } of candidates) {
      if (!inScope(l.scope, t, nowMs)) continue;
      switch (l.metric) {
        case 'delta':
        case 'gamma':
        case 'pv':
        case 'cashDelta':
        case 'vega':
          v += c[l.metric];
          break;
        default:
          break;
      }
    }
    out.set(l.limitId, utilization(v, l));
  }
  return out;
}
