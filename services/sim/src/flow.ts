/**
 * Trades: the initial book and the steady flow of new trades, amends and cancels. Each trade's
 * current state is kept so that amends carry the whole trade with the next version.
 */
import {
  formatTs,
  type OptionInstrument,
  type TradeBookingMsg,
  type TradeCancelMsg,
} from '@keelson/shared-types';
import { MS_PER_YEAR, roundToStep, type Market } from './market.ts';
import { optionPrice, type Payoff, type Right } from './pricing.ts';
import type { Rng } from './rng.ts';
import { round, type SimUnderlying } from './universe.ts';

/** The live trades, with O(1) random pick and removal. */
export class TradeBook {
  private readonly byId = new Map<string, TradeBookingMsg>();
  private readonly ids: string[] = [];
  private readonly slot = new Map<string, number>();
  private counter = 0;

  nextId(): string {
    this.counter++;
    return `T-${String(this.counter).padStart(7, '0')}`;
  }

  get size(): number {
    return this.ids.length;
  }

  put(t: TradeBookingMsg): void {
    if (!this.slot.has(t.tradeId)) {
      this.slot.set(t.tradeId, this.ids.length);
      this.ids.push(t.tradeId);
    }
    this.byId.set(t.tradeId, t);
  }

  remove(id: string): void {
    const at = this.slot.get(id);
    if (at === undefined) return;
    const last = this.ids.pop() as string;
    if (last !== id) {
      this.ids[at] = last;
      this.slot.set(last, at);
    }
    this.slot.delete(id);
    this.byId.delete(id);
  }

  pick(rng: Rng): TradeBookingMsg | undefined {
    if (this.ids.length === 0) return undefined;
    return this.byId.get(rng.pick(this.ids));
  }

  get(id: string): TradeBookingMsg | undefined {
    return this.byId.get(id);
  }

  all(): IterableIterator<TradeBookingMsg> {
    return this.byId.values();
  }
}

export interface FlowMix {
  /** share of option trades among new trades (the rest are linear) */
  optionShare: number;
}

/** Per-underlying popularity weights for choosing what the next trade is on. */
export class UnderlyingPicker {
  private readonly weights: number[];
  private readonly total: number;
  constructor(universe: readonly SimUnderlying[]) {
    this.weights = universe.map((u) => u.popularity);
    this.total = this.weights.reduce((s, w) => s + w, 0);
  }
  pick(rng: Rng): number {
    return rng.weightedIndex(this.weights, this.total);
  }
}

const PRICE_NOISE = 0.02;

/** A new trade on name i at nowMs, priced near fair value (small noise so P&L is not all zero). */
export function newTrade(
  rng: Rng,
  market: Market,
  book: TradeBook,
  i: number,
  nowMs: number,
  mix: FlowMix,
): TradeBookingMsg {
  const u = market.universe[i] as SimUnderlying;
  const where = rng.pick(u.books);
  const isHedgeBook = where.book.endsWith('-HEDGE') || where.book.endsWith('-FUT');
  const linear = isHedgeBook ? rng.chance(0.8) : !rng.chance(mix.optionShare);
  const side = rng.chance(0.5) ? 1 : -1;
  const ts = formatTs(nowMs);
  const spot = market.spot(i);
  if (linear) {
    const quantity = side * rng.int(1, 40) * u.lotSize * (u.simKind === 'equity' ? 10 : 1);
    return {
      type: 'trade',
      tradeId: book.nextId(),
      version: 1,
      action: 'new',
      ts,
      desk: where.desk,
      book: where.book,
      underlying: u.name,
      instrument: { kind: 'linear', multiplier: u.simKind === 'future' ? u.optionMultiplier : 1 },
      quantity,
      price: round(spot * (1 + rng.normal() * 0.0005), u.priceDecimals),
    };
  }
  const live = market.expiries.filter((e) => e > nowMs + 86_400_000);
  // Short expiries trade most, as on any listed options market.
  const expiry =
    live.length > 0
      ? (live[Math.min(Math.floor(rng.exponential(2.5)), live.length - 1)] ?? 0)
      : nowMs + 30 * 86_400_000;
  const tau = (expiry - nowMs) / MS_PER_YEAR;
  // Strikes cluster around the money, spread by about two thirds of a standard deviation.
  const moneyness = Math.exp(rng.normal() * 0.7 * u.vol * Math.sqrt(Math.max(tau, 0.02)));
  const strike = Math.max(roundToStep(spot * moneyness, u.strikeStep), u.strikeStep);
  const right: Right = rng.chance(0.5) ? 'call' : 'put';
  const roll = rng.uniform();
  const payoff: Payoff = roll < 0.9 ? 'vanilla' : roll < 0.97 ? 'cash-digital' : 'asset-digital';
  const cashAmount =
    payoff === 'cash-digital' ? roundToStep(spot * 0.1, u.strikeStep) || u.strikeStep : undefined;
  const instrument: OptionInstrument = {
    kind: 'option',
    right,
    payoff,
    strike,
    expiry: formatTs(expiry),
    multiplier: u.optionMultiplier,
  };
  if (cashAmount !== undefined) instrument.cashAmount = cashAmount;
  const fair = optionPrice({ right, payoff, cashAmount, ...market.quoteInputs(i, strike, expiry, nowMs) });
  const price = round(Math.max(fair * (1 + rng.normal() * PRICE_NOISE), 0), 6);
  const lots = Math.max(1, Math.round(rng.exponential(12)));
  return {
    type: 'trade',
    tradeId: book.nextId(),
    version: 1,
    action: 'new',
    ts,
    desk: where.desk,
    book: where.book,
    underlying: u.name,
    instrument,
    quantity: side * lots * (u.simKind === 'fx' ? u.lotSize : 1),
    price,
  };
}

/**
 * An amend: a fill size changed, a price corrected, or the trade moved to another book that
 * trades the name. Never a different underlying (the bus key; the contract rejects that).
 */
export function amendTrade(rng: Rng, market: Market, t: TradeBookingMsg, nowMs: number): TradeBookingMsg {
  const i = market.indexOf.get(t.underlying) ?? 0;
  const u = market.universe[i] as SimUnderlying;
  const next: TradeBookingMsg = { ...t, version: t.version + 1, action: 'amend', ts: formatTs(nowMs) };
  const roll = rng.uniform();
  if (roll < 0.6) {
    const factor = rng.between(0.5, 1.6);
    const q = Math.round(t.quantity * factor);
    next.quantity = q === 0 ? Math.sign(t.quantity) : q;
  } else if (roll < 0.85) {
    next.price = round(t.price * (1 + rng.normal() * 0.01), 6);
  } else {
    const where = rng.pick(u.books);
    next.desk = where.desk;
    next.book = where.book;
  }
  return next;
}

export function cancelTrade(t: TradeBookingMsg, nowMs: number): TradeCancelMsg {
  return {
    type: 'trade',
    tradeId: t.tradeId,
    version: t.version + 1,
    action: 'cancel',
    underlying: t.underlying,
    ts: formatTs(nowMs),
  };
}
