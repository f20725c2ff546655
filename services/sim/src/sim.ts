/**
 * MarketSim: a deterministic, seeded generator of contract input messages for the demo and for
 * `keelson sim`. It reads no clock: time is what the caller passes to step().
 */
import {
  formatTs,
  type CurveMsg,
  type InputMsg,
  type LimitMsg,
  type SpotMsg,
  type TradeBookingMsg,
  type UnderlyingMsg,
  type VolSurfaceMsg,
} from '@keelson/shared-types';
import { amendTrade, cancelTrade, newTrade, TradeBook, UnderlyingPicker } from './flow.ts';
import { estimateUtilizations, sizeLimits } from './limits.ts';
import { malformedLine } from './malformed.ts';
import { Market, type SurfaceMode } from './market.ts';
import { Rng, STREAM } from './rng.ts';
import {
  buildUniverse,
  CURRENCIES,
  DESKS,
  REPORTING_CURRENCY,
  type Currency,
  type SimUnderlying,
} from './universe.ts';

export interface SimOptions {
  /** default 1 */
  seed?: number;
  /** total number of underlyings, default 300 (the 13 FX pairs, indices and futures always included) */
  underlyings?: number;
  /** initial book size, default 20000 */
  trades?: number;
  /** epoch ms of the bootstrap; step() continues from here */
  startMs: number;
  /** spot tick grid, default 250 ms */
  tickIntervalMs?: number;
  /** how surfaces move with spot, default 'sticky-moneyness' */
  surfaceMode?: SurfaceMode;
  /** market time per wall time, default 1 (10 = ten seconds of moves each second) */
  marketSpeed?: number;
  /** replaces every underlying's own tick probability per interval (liquidity), 0..1 */
  tickProbability?: number;
  /** a quiet feed still sends a price this often, default 2000 ms (outages aside) */
  heartbeatMs?: number;
  /** trade events per minute (new, amend and cancel together), default 120 */
  tradesPerMinute?: number;
  /** shares of amends and cancels among trade events, defaults 0.15 and 0.08 */
  amendShare?: number;
  cancelShare?: number;
  /** share of trade events delivered twice (same version), default 0.03 */
  duplicateShare?: number;
  /** share of options among new trades outside hedge books, default 0.85 */
  optionShare?: number;
  /** malformed raw lines per minute, default 1 */
  malformedPerMinute?: number;
  /** vol-level shocks per minute across the universe, default 6 */
  surfaceShocksPerMinute?: number;
  /** curve moves per minute across the five currencies, default 2 */
  curveMovesPerMinute?: number;
  /** feed outages per hour (a feed falls silent), default 4, each lasting outageMs (default 12000) */
  outagesPerHour?: number;
  outageMs?: number;
  /** jumps per market day per single-stock equity, default 0.2 */
  jumpsPerDay?: number;
  /** factor loadings of single stocks on the market and on their sector, defaults 0.55 and 0.35 */
  marketLoading?: number;
  sectorLoading?: number;
}

export interface StepResult {
  messages: InputMsg[];
  /** raw lines that must be rejected: bad JSON or a field out of its domain */
  malformed: string[];
}

/** What the simulated world holds, for documentation, screens and tests. */
export interface SimUniverse {
  reportingCurrency: string;
  currencies: readonly string[];
  desks: { desk: string; books: readonly string[] }[];
  underlyings: {
    name: string;
    kind: 'equity' | 'future' | 'fx';
    /** 'index' marks an equity index */
    simKind: 'equity' | 'index' | 'future' | 'fx';
    currency: string;
    sector: string;
    sectorSign: number;
    marketLoading: number;
    sectorLoading: number;
    /** diffusion vol per year of market time */
    vol: number;
    dividendYield: number;
    /** number of discrete dividends in its reference data */
    discreteDividends: number;
    jumpsPerDay: number;
    tickProbability: number;
    /** for futures, the index it tracks */
    tracks?: string;
  }[];
}

type Resolved = Required<Omit<SimOptions, 'tickProbability'>> & { tickProbability: number | undefined };

function resolve(opts: SimOptions): Resolved {
  if (!Number.isFinite(opts.startMs)) throw new RangeError('SimOptions.startMs must be a finite epoch ms');
  const r: Resolved = {
    seed: opts.seed ?? 1,
    underlyings: opts.underlyings ?? 300,
    trades: opts.trades ?? 20_000,
    startMs: Math.floor(opts.startMs),
    tickIntervalMs: opts.tickIntervalMs ?? 250,
    surfaceMode: opts.surfaceMode ?? 'sticky-moneyness',
    marketSpeed: opts.marketSpeed ?? 1,
    tickProbability: opts.tickProbability,
    heartbeatMs: opts.heartbeatMs ?? 2000,
    tradesPerMinute: opts.tradesPerMinute ?? 120,
    amendShare: opts.amendShare ?? 0.15,
    cancelShare: opts.cancelShare ?? 0.08,
    duplicateShare: opts.duplicateShare ?? 0.03,
    optionShare: opts.optionShare ?? 0.85,
    malformedPerMinute: opts.malformedPerMinute ?? 1,
    surfaceShocksPerMinute: opts.surfaceShocksPerMinute ?? 6,
    curveMovesPerMinute: opts.curveMovesPerMinute ?? 2,
    outagesPerHour: opts.outagesPerHour ?? 4,
    outageMs: opts.outageMs ?? 12_000,
    jumpsPerDay: opts.jumpsPerDay ?? 0.2,
    marketLoading: opts.marketLoading ?? 0.55,
    sectorLoading: opts.sectorLoading ?? 0.35,
  };
  const nonNegative: (keyof Resolved)[] = [
    'trades',
    'tradesPerMinute',
    'amendShare',
    'cancelShare',
    'duplicateShare',
    'malformedPerMinute',
    'surfaceShocksPerMinute',
    'curveMovesPerMinute',
    'outagesPerHour',
    'outageMs',
    'jumpsPerDay',
    'marketLoading',
    'sectorLoading',
    'underlyings',
  ];
  for (const k of nonNegative) {
    const v = r[k];
    if (typeof v !== 'number' || !Number.isFinite(v) || v < 0)
      throw new RangeError(`SimOptions.${k} must be a finite number >= 0`);
  }
  for (const k of ['tickIntervalMs', 'marketSpeed', 'heartbeatMs'] as const) {
    if (!(r[k] > 0) || !Number.isFinite(r[k])) throw new RangeError(`SimOptions.${k} must be > 0`);
  }
  if (r.amendShare + r.cancelShare > 1)
    throw new RangeError('SimOptions.amendShare + cancelShare must be <= 1');
  if (r.marketLoading ** 2 + r.sectorLoading ** 2 >= 1) {
    throw new RangeError('SimOptions.marketLoading^2 + sectorLoading^2 must be < 1');
  }
  if (r.tickProbability !== undefined && !(r.tickProbability >= 0 && r.tickProbability <= 1)) {
    throw new RangeError('SimOptions.tickProbability must be within [0, 1]');
  }
  for (const k of ['duplicateShare', 'optionShare'] as const) {
    if (!(r[k] >= 0 && r[k] <= 1)) throw new RangeError(`SimOptions.${k} must be within [0, 1]`);
  }
  return r;
}

const MINUTE = 60_000;

/** Mean gap in ms between events of a process with the given rate per minute (Infinity when off). */
function meanGap(perMinute: number): number {
  return perMinute > 0 ? MINUTE / perMinute : Number.POSITIVE_INFINITY;
}

export class MarketSim {
  private readonly o: Resolved;
  private readonly universeList: SimUnderlying[];
  private readonly market: Market;
  private readonly book = new TradeBook();
  private readonly picker: UnderlyingPicker;
  private readonly rng: Record<keyof typeof STREAM, Rng>;
  private readonly bootstrapMessages: InputMsg[];
  private prevMs: number;
  private nextGridMs: number;
  private nextTradeMs: number;
  private nextShockMs: number;
  private nextCurveMs: number;
  private nextMalformedMs: number;
  private nextOutageMs: number;
  private readonly lastTickMs: Float64Array;
  private readonly quietUntil: Float64Array;
  /** duplicates waiting to be resent, in time order */
  private readonly resend: { atMs: number; msg: InputMsg }[] = [];
  private lastEmitted: InputMsg | undefined;

  constructor(opts: SimOptions) {
    this.o = resolve(opts);
    const seed = this.o.seed;
    this.rng = Object.fromEntries(
      Object.entries(STREAM).map(([name, stream]) => [name, new Rng(seed, stream)]),
    ) as Record<keyof typeof STREAM, Rng>;
    this.universeList = buildUniverse(this.rng.universe, {
      underlyings: this.o.underlyings,
      marketLoading: this.o.marketLoading,
      sectorLoading: this.o.sectorLoading,
      jumpsPerDay: this.o.jumpsPerDay,
      tickProbability: this.o.tickProbability,
    });
    this.market = new Market(this.universeList, this.o.startMs, this.o.surfaceMode, this.o.marketSpeed);
    this.picker = new UnderlyingPicker(this.universeList);
    const start = this.o.startMs;
    this.prevMs = start;
    this.nextGridMs = start + this.o.tickIntervalMs;
    this.nextTradeMs = start + this.rng.trades.exponential(meanGap(this.o.tradesPerMinute));
    this.nextShockMs = start + this.rng.surfaces.exponential(meanGap(this.o.surfaceShocksPerMinute));
    this.nextCurveMs = start + this.rng.curves.exponential(meanGap(this.o.curveMovesPerMinute));
    this.nextMalformedMs = start + this.rng.malformed.exponential(meanGap(this.o.malformedPerMinute));
    this.nextOutageMs = start + this.rng.outages.exponential(meanGap(this.o.outagesPerHour / 60));
    this.lastTickMs = new Float64Array(this.universeList.length).fill(start);
    this.quietUntil = new Float64Array(this.universeList.length).fill(Number.NEGATIVE_INFINITY);
    this.bootstrapMessages = this.buildBootstrap();
  }

  /** Reference data, curves, first spots, surfaces, the initial book and the limits, all at startMs. */
  bootstrap(): InputMsg[] {
    return this.bootstrapMessages.slice();
  }

  /**
   * Everything that happens in (previous step, nowMs]: spot ticks, surface and curve moves,
   * trade flow with duplicates, and a few malformed raw lines. Messages come in time order
   * (a duplicate repeats its original's ts). A nowMs not after the previous one yields nothing.
   */
  step(nowMs: number): StepResult {
    const messages: InputMsg[] = [];
    const malformed: string[] = [];
    if (!(nowMs > this.prevMs)) return { messages, malformed };
    for (;;) {
      const resendAt = this.resend[0]?.atMs ?? Number.POSITIVE_INFINITY;
      const t = Math.min(
        this.nextGridMs,
        this.nextTradeMs,
        this.nextShockMs,
        this.nextCurveMs,
        this.nextMalformedMs,
        this.nextOutageMs,
        resendAt,
      );
      if (t > nowMs) break;
      // Ties resolve in this fixed order, so the result never depends on how time was sliced.
      if (t === this.nextGridMs) {
        this.onGrid(t, messages);
        this.nextGridMs += this.o.tickIntervalMs;
      } else if (t === this.nextTradeMs) {
        this.onTrade(t, messages);
        this.nextTradeMs = t + this.rng.trades.exponential(meanGap(this.o.tradesPerMinute));
      } else if (t === resendAt) {
        const item = this.resend.shift();
        if (item) messages.push(item.msg);
      } else if (t === this.nextShockMs) {
        this.onSurfaceShock(t, messages);
        this.nextShockMs = t + this.rng.surfaces.exponential(meanGap(this.o.surfaceShocksPerMinute));
      } else if (t === this.nextCurveMs) {
        this.onCurveMove(t, messages);
        this.nextCurveMs = t + this.rng.curves.exponential(meanGap(this.o.curveMovesPerMinute));
      } else if (t === this.nextMalformedMs) {
        malformed.push(
          malformedLine(this.rng.malformed, this.lastEmitted ?? (this.bootstrapMessages[0] as InputMsg)),
        );
        this.nextMalformedMs = t + this.rng.malformed.exponential(meanGap(this.o.malformedPerMinute));
      } else {
        this.onOutage(t);
        this.nextOutageMs = t + this.rng.outages.exponential(meanGap(this.o.outagesPerHour / 60));
      }
    }
    this.prevMs = nowMs;
    return { messages, malformed };
  }

  /** The simulated world: desks, books and underlyings with their model parameters. */
  universe(): SimUniverse {
    return {
      reportingCurrency: REPORTING_CURRENCY,
      currencies: CURRENCIES,
      desks: DESKS.map((d) => ({ desk: d.desk, books: d.books })),
      underlyings: this.universeList.map((u) => {
        const row: SimUniverse['underlyings'][number] = {
          name: u.name,
          kind: u.kind,
          simKind: u.simKind,
          currency: u.currency,
          sector: u.sector,
          sectorSign: u.sectorSign,
          marketLoading: u.marketLoading,
          sectorLoading: u.sectorLoading,
          vol: u.vol,
          dividendYield: u.dividendYield,
          discreteDividends: u.dividends.length,
          jumpsPerDay: u.jumpsPerDay,
          tickProbability: u.tickProbability,
        };
        if (u.tracks !== undefined) row.tracks = u.tracks;
        return row;
      }),
    };
  }

  /** Live (not cancelled) trades right now. */
  liveTrades(): number {
    return this.book.size;
  }

  /**
   * The simulator's own estimate of every bootstrap limit's utilization now, from its small
   * pricer (the engine's exact figures differ a little): for checking that the demo tests its
   * limits, not for risk.
   */
  estimatedUtilizations(): Map<string, number> {
    const limits = this.bootstrapMessages.filter((m): m is LimitMsg => m.type === 'limit');
    return estimateUtilizations(this.market, this.book.all(), limits, this.prevMs);
  }

  /** The current model price of a name (unrounded), or undefined for an unknown name. */
  priceOf(name: string): number | undefined {
    const i = this.market.indexOf.get(name);
    return i === undefined ? undefined : this.market.spot(i);
  }

  // ------------------------------------------------------------------ bootstrap

  private buildBootstrap(): InputMsg[] {
    const t = this.o.startMs;
    const ts = formatTs(t);
    const out: InputMsg[] = [];
    for (const u of this.universeList) out.push(this.underlyingMsg(u, ts));
    for (const ccy of CURRENCIES) out.push(this.curveMsg(ccy, ts));
    this.universeList.forEach((_, i) => out.push(this.spotMsg(i, ts)));
    this.universeList.forEach((_, i) => out.push(this.surfaceMsg(i, t)));
    const trades: TradeBookingMsg[] = [];
    for (let k = 0; k < this.o.trades; k++) {
      const trade = newTrade(this.rng.book, this.market, this.book, this.picker.pick(this.rng.book), t, {
        optionShare: this.o.optionShare,
      });
      this.book.put(trade);
      trades.push(trade);
    }
    out.push(...trades);
    // Limits last: each is checked once on arrival against the whole book, not raised and
    // eased over and over while the book loads.
    out.push(...sizeLimits(this.rng.limits, this.market, trades, t));
    this.lastEmitted = out.at(-1);
    return out;
  }

  private underlyingMsg(u: SimUnderlying, ts: string): UnderlyingMsg {
    return {
      type: 'underlying',
      underlying: u.name,
      kind: u.kind,
      currency: u.currency,
      dividendYield: u.dividendYield,
      dividends: u.dividends.map((d) => ({
        exDate: formatTs(this.o.startMs + d.offsetMs),
        amount: d.amount,
      })),
      ts,
    };
  }

  private curveMsg(ccy: Currency, ts: string): CurveMsg {
    const c = this.market.curve(ccy);
    return { type: 'curve', currency: ccy, ts, tenors: [...c.tenors], zeroRates: [...c.zeroRates] };
  }

  private spotMsg(i: number, ts: string): SpotMsg {
    const u = this.universeList[i] as SimUnderlying;
    // Eight significant figures rather than a tick size: rounding must not blur the statistics
    // of small moves (a sub-tick move would otherwise vanish), and a price never rounds to 0.
    return { type: 'spot', underlying: u.name, price: Number(this.market.spot(i).toPrecision(8)), ts };
  }

  private surfaceMsg(i: number, nowMs: number, ts = formatTs(nowMs)): VolSurfaceMsg {
    const u = this.universeList[i] as SimUnderlying;
    const msg: VolSurfaceMsg = {
      type: 'vol-surface',
      underlying: u.name,
      ts,
      expiries: [...this.market.expiryIsos],
      strikes: [...(this.market.strikes[i] ?? [])],
      vols: this.market.surfaceVols(i, nowMs),
    };
    this.market.markSurfacePublished(i);
    return msg;
  }

  // ------------------------------------------------------------------ events

  private onGrid(t: number, out: InputMsg[]): void {
    this.market.diffuse(this.rng.diffusion, t);
    const ts = formatTs(t);
    const n = this.universeList.length;
    for (let i = 0; i < n; i++) {
      const u = this.universeList[i] as SimUnderlying;
      const draw = this.rng.ticks.uniform(); // drawn for every name every interval: keeps the stream aligned
      if (t < (this.quietUntil[i] ?? 0)) continue;
      const due = t - (this.lastTickMs[i] ?? 0) >= this.o.heartbeatMs;
      if (draw < u.tickProbability || due) {
        out.push(this.spotMsg(i, ts));
        this.lastTickMs[i] = t;
      }
      if (this.market.surfaceDue(i)) out.push(this.surfaceMsg(i, t, ts));
    }
  }

  private onTrade(t: number, out: InputMsg[]): void {
    const rng = this.rng.trades;
    const at = Math.ceil(t);
    const roll = rng.uniform();
    let msg: InputMsg;
    const existing = roll < this.o.amendShare + this.o.cancelShare ? this.book.pick(rng) : undefined;
    if (existing !== undefined && roll < this.o.amendShare) {
      const amended = amendTrade(rng, this.market, existing, at);
      this.book.put(amended);
      msg = amended;
    } else if (existing !== undefined) {
      msg = cancelTrade(existing, at);
      this.book.remove(existing.tradeId);
    } else {
      const trade = newTrade(rng, this.market, this.book, this.picker.pick(rng), at, {
        optionShare: this.o.optionShare,
      });
      this.book.put(trade);
      msg = trade;
    }
    out.push(msg);
    this.lastEmitted = msg;
    if (rng.chance(this.o.duplicateShare)) {
      // Redelivered a little later with the same version, as an at-least-once bus does.
      this.resend.push({ atMs: t + rng.between(200, 3000), msg });
      this.resend.sort((a, b) => a.atMs - b.atMs);
    }
  }

  private onSurfaceShock(t: number, out: InputMsg[]): void {
    const rng = this.rng.surfaces;
    const i = this.picker.pick(rng);
    this.market.shockVolLevel(i, rng.normal() * 0.05);
    out.push(this.surfaceMsg(i, t));
  }

  private onCurveMove(t: number, out: InputMsg[]): void {
    const rng = this.rng.curves;
    const ccy = rng.pick(CURRENCIES);
    this.market.moveCurve(rng, ccy);
    out.push(this.curveMsg(ccy, formatTs(Math.ceil(t))));
  }

  private onOutage(t: number): void {
    const rng = this.rng.outages;
    const i = this.picker.pick(rng);
    this.quietUntil[i] = t + this.o.outageMs;
  }
}
