// The risk engine: trade lifecycle, market state, incremental revaluation, the node cube, limits.
// Each input marks what it touches (instruments to reprice, holdings to rescale), the dirty
// instruments are priced once each through the typed-array batch pricer, and every holding whose
// contribution changed moves its nodes by the difference. Nothing is re-summed on the hot path.
import {
  allocGreeksBatch,
  allocOptionBatch,
  discountFactor,
  priceBatch,
  surfaceVol,
  yearFraction,
  zeroRate,
} from '@keelson/quant';
import type { GreeksBatch, OptionBatch } from '@keelson/quant';
import { METRICS, TENORS, UNPRICED_REASONS, decodeInput, formatTs, tenorBucket } from '@keelson/shared-types';
import type {
  AlertMsg,
  CurveMsg,
  DecodeResult,
  ExposureMsg,
  InputMsg,
  LimitMsg,
  LimitRemoveMsg,
  Metric,
  RejectedMsg,
  SpotMsg,
  StaleFeedMsg,
  TradeMsg,
  UnderlyingMsg,
  VolSurfaceMsg,
} from '@keelson/shared-types';
import type { Clock } from './clock.ts';
import { DeadlineHeap } from './feeds.ts';
import type { FeedEntry } from './feeds.ts';
import {
  EMPTY,
  InstrumentTable,
  PRICED,
  R_NO_CURVE,
  R_NO_FX,
  R_NO_REFERENCE,
  R_NO_SPOT,
  R_NO_VOL,
  intrinsic,
} from './instruments.ts';
import { LimitMonitor } from './limits.ts';
import type { LimitView, MetricValues } from './limits.ts';
import { ExposureView, NodeCube, exposureOf } from './nodes.ts';
import type { Node, NodeGroup, NodeSet, Pending } from './nodes.ts';
import { partialOf } from './partials.ts';
import { msOf } from './time.ts';
import type { NodePartial } from './partials.ts';
import {
  METRIC_COUNT,
  M_CASH_DELTA,
  M_CASH_GAMMA,
  M_DELTA,
  M_GAMMA,
  M_PNL,
  M_PV,
  M_RHO,
  M_THETA,
  M_VEGA,
} from './sums.ts';

export type Outcome = 'accepted' | 'duplicate' | 'rejected';

/** One record of a spot run (ingestSpots); `decoded` as for ingest(). */
export interface SpotItem {
  raw: string;
  source: string;
  decoded?: DecodeResult;
}

export interface EngineObserver {
  /** `count` inputs of one type and outcome (default 1). */
  input?(type: string, outcome: Outcome, count?: number): void;
  /** instrument revaluations performed by one input (or one revalueAll) */
  revaluations?(count: number): void;
  /** nodes whose exposure changed through one input */
  exposuresChanged?(count: number): void;
  alert?(a: AlertMsg): void;
  staleFeed?(e: StaleFeedMsg): void;
  rejected?(r: RejectedMsg): void;
}

export interface EngineOptions {
  reportingCurrency?: string;
  staleAfterMs?: number;
  /** 'event': valuation time = largest ts among inputs that passed validation (duplicates included). */
  clock: Clock | 'event';
  observer?: EngineObserver;
}

export interface EngineDrain {
  exposures: ExposureMsg[];
  alerts: (AlertMsg | StaleFeedMsg)[];
  rejected: RejectedMsg[];
}

export interface EngineStats {
  positions: number;
  instruments: number;
  unpriced: Record<string, number>;
  revaluations: number;
  valuationMs: number;
}

interface RefData {
  kind: 'equity' | 'future' | 'fx';
  currency: string;
  dividendYield: number;
  /** sorted by exDate */
  dividends: { exMs: number; amount: number }[];
  /** for fx: the base currency, whose curve gives the foreign rate */
  base: string | undefined;
}

interface Surface {
  expiriesMs: number[];
  strikes: number[];
  vols: number[][];
  /** pillar year fractions at `atMs`, recomputed when valuation time moves */
  atMs: number;
  pillarTaus: number[];
}

interface Curve {
  tenors: number[];
  zeroRates: number[];
  tsMs: number;
}

class Underlying implements FeedEntry {
  ref: RefData | undefined;
  refTsMs = Number.NEGATIVE_INFINITY;
  spot = 0;
  hasSpot = false;
  lastTickMs = Number.NEGATIVE_INFINITY;
  stale = false;
  inHeap = false;
  surface: Surface | undefined;
  surfaceTsMs = Number.NEGATIVE_INFINITY;
  readonly instruments: number[] = [];
  constructor(
    readonly name: string,
    readonly index: number,
  ) {}
}

/** The trades of one desk/book on one instrument: priced once, scaled by the summed size. */
class Holding {
  // quantity x multiplier and cost, compensated (Neumaier) as trades come and go; plain fields
  // rather than accumulator objects, so one update reads one object and one slab row
  qmS = 0;
  qmC = 0;
  costS = 0;
  costC = 0;
  trades = 0;
  /** position in its instrument's holding list, for O(1) removal */
  slot = -1;
  // what this holding currently contributes to its nodes
  set: NodeSet | null = null;
  reason = EMPTY;
  stale = false;
  appliedTrades = 0;
  constructor(
    readonly key: string,
    readonly inst: number,
    readonly und: Underlying,
    readonly desk: string,
    readonly book: string,
    /** its row of a shared slab: the contribution currently applied to its nodes */
    readonly vec: Float64Array,
  ) {}

  get qm(): number {
    return this.qmS + this.qmC;
  }

  get cost(): number {
    return this.costS + this.costC;
  }

  addTrade(qm: number, cost: number, sign: 1 | -1): void {
    const a = sign * qm;
    let t = this.qmS + a;
    this.qmC += Math.abs(this.qmS) >= Math.abs(a) ? this.qmS - t + a : a - t + this.qmS;
    this.qmS = t;
    const c = sign * cost;
    t = this.costS + c;
    this.costC += Math.abs(this.costS) >= Math.abs(c) ? this.costS - t + c : c - t + this.costS;
    this.costS = t;
    this.trades += sign;
    if (this.trades === 0) {
      this.qmS = this.qmC = this.costS = this.costC = 0;
    }
  }
}

/** Contribution rows carved from shared slabs and reused, so holdings sit close in memory. */
class VecSlab {
  private chunk = new Float64Array(0);
  private used = 0;
  private readonly free: Float64Array[] = [];
  take(): Float64Array {
    const f = this.free.pop();
    if (f) return f;
    if (this.used === this.chunk.length) {
      this.chunk = new Float64Array(METRIC_COUNT * 4096);
      this.used = 0;
    }
    const v = this.chunk.subarray(this.used, this.used + METRIC_COUNT);
    this.used += METRIC_COUNT;
    return v;
  }
  give(v: Float64Array): void {
    v.fill(0);
    this.free.push(v);
  }
}

interface LiveTrade {
  holding: Holding;
  /** quantity x multiplier */
  qm: number;
  /** quantity x multiplier x trade price, in the underlying's currency */
  cost: number;
}

interface TradeRecord {
  version: number;
  underlying: string;
  live: LiveTrade | null;
}

const ZERO_VEC = new Float64Array(METRIC_COUNT);

export class RiskEngine {
  readonly reportingCurrency: string;
  readonly staleAfterMs: number;
  private readonly clock: Clock | null;
  private readonly observer: EngineObserver | undefined;

  private eventMs = 0;
  private valuationMs = 0;
  private seq = 0;
  /** Dirty marks: per input, and per spot within a run (an instrument repriced for one spot of the run may be moved again by the next). */
  private markSeq = 0;

  private readonly unds = new Map<string, Underlying>();
  private readonly undList: Underlying[] = [];
  private readonly curves = new Map<string, Curve>();
  /** currency -> underlyings quoted in it */
  private readonly byCurrency = new Map<string, Set<Underlying>>();
  /** currency -> fx underlyings whose base currency it is */
  private readonly byFxBase = new Map<string, Set<Underlying>>();
  /** conversion rate into the reporting currency, per currency, or null when its pair has no spot */
  private readonly fxCache = new Map<string, number | null>();

  private readonly trades = new Map<string, TradeRecord>();
  private liveTrades = 0;
  private readonly holdings = new Map<string, Holding>();
  private readonly slab = new VecSlab();
  private readonly instHoldings: Holding[][] = [];
  private readonly inst = new InstrumentTable();

  private readonly cube = new NodeCube();
  private readonly limitBook = new LimitMonitor();
  private readonly heap = new DeadlineHeap<Underlying>();

  // pricing scratch
  private batch: OptionBatch = allocOptionBatch(0);
  private out: GreeksBatch = allocGreeksBatch(0);
  private batchCap = 0;
  private batchInst = new Int32Array(0);
  private batchDivRho = new Float64Array(0);
  private readonly scratch = new Float64Array(METRIC_COUNT);
  private readonly dirty: number[] = [];

  // per-input bookkeeping
  private readonly checkNodes: Node[] = [];
  private inputAlerts: AlertMsg[] = [];
  private inputRevaluations = 0;
  private inputChangedNodes = 0;

  // outputs since the last drain
  /** nodes changed since the last drain, each once (Node.outPending) */
  private outNodes: Node[] = [];
  private outAlerts: (AlertMsg | StaleFeedMsg)[] = [];
  private outRejected: RejectedMsg[] = [];
  private totalRevaluations = 0;

  constructor(opts: EngineOptions) {
    this.reportingCurrency = opts.reportingCurrency ?? 'USD';
    if (!/^[A-Z]{3}$/.test(this.reportingCurrency)) {
      throw new RangeError(
        `reportingCurrency must be a three-letter upper-case code, got ${JSON.stringify(this.reportingCurrency)}`,
      );
    }
    this.staleAfterMs = opts.staleAfterMs ?? 5000;
    if (!(this.staleAfterMs >= 0) || !Number.isFinite(this.staleAfterMs)) {
      throw new RangeError(`staleAfterMs must be a finite number >= 0, got ${this.staleAfterMs}`);
    }
    this.clock = opts.clock === 'event' ? null : opts.clock;
    this.observer = opts.observer;
    if (this.clock) this.valuationMs = this.clock.now();
  }

  // ------------------------------------------------------------------ public API

  /** `decoded`: decodeInput(raw), when the caller has it already (the runner's batch plan). */
  ingest(raw: string, source: string, decoded?: DecodeResult): Outcome {
    const d = decoded ?? decodeInput(raw);
    if (!d.ok) return this.rejectUndecodable(d.reason, source, raw);
    return this.process(d.msg, source, raw);
  }

  apply(msg: InputMsg, source: string): Outcome {
    return this.process(msg, source, undefined);
  }

  /**
   * A run of spot records (in bus order, already conflated) applied as one market move: each is
   * decoded, validated and applied in turn, then the nodes they changed are updated, published
   * and checked against their limits once, after the last. A limit is therefore not checked
   * against the part-moved states inside the run (one underlying moved, the next not yet), which
   * are artefacts of applying ticks one at a time rather than states of the market; the state
   * after the run is the one per-record ingestion reaches. Anything that is not a spot ends the
   * run and is processed on its own, as by ingest().
   */
  ingestSpots(items: readonly SpotItem[]): Outcome[] {
    const out = new Array<Outcome>(items.length);
    let open = false;
    for (let k = 0; k < items.length; k++) {
      const { raw, source, decoded } = items[k] as SpotItem;
      const d = decoded ?? decodeInput(raw);
      if (!d.ok) {
        out[k] = this.rejectUndecodable(d.reason, source, raw);
        continue;
      }
      if (d.msg.type !== 'spot') {
        if (open) this.finish();
        open = false;
        out[k] = this.process(d.msg, source, raw);
        continue;
      }
      if (open) this.advance(msOf(d.msg.ts));
      else this.begin(msOf(d.msg.ts));
      open = true;
      const outcome = this.onSpot(d.msg);
      this.observer?.input?.('spot', outcome);
      out[k] = outcome;
    }
    if (open) this.finish();
    return out;
  }

  revalueAll(): void {
    this.begin(this.clock ? this.clock.now() : this.eventMs);
    for (let i = 0; i < this.inst.count; i++) this.markDirty(i);
    this.repriceDirty();
    this.flush();
    this.resyncSums();
    // every limit once more, whatever changed (checking is idempotent for unchanged values)
    for (const key of this.limitBook.scopes()) {
      const n = this.cube.getNode(key);
      if (n) this.pushCheck(n);
    }
    this.finish();
  }

  drain(): EngineDrain {
    const nodes = this.takeChanged();
    const exposures = nodes.map((n) => exposureOf(n, this.reportingCurrency, UNPRICED_REASONS));
    const alerts = this.outAlerts;
    const rejected = this.outRejected;
    this.outAlerts = [];
    this.outRejected = [];
    return { exposures, alerts, rejected };
  }

  /**
   * Like drain, but the changed nodes as views read when they are published: a runner that
   * coalesces exposures builds each once per flush instead of once per batch.
   */
  drainChanged(): { changed: ExposureView[]; alerts: (AlertMsg | StaleFeedMsg)[]; rejected: RejectedMsg[] } {
    const nodes = this.takeChanged();
    const changed = new Array<ExposureView>(nodes.length);
    for (let k = 0; k < nodes.length; k++) {
      const n = nodes[k] as Node;
      changed[k] = n.view ??= new ExposureView(n, this.reportingCurrency, UNPRICED_REASONS);
    }
    const alerts = this.outAlerts;
    const rejected = this.outRejected;
    this.outAlerts = [];
    this.outRejected = [];
    return { changed, alerts, rejected };
  }

  /** Like drain, but the changed nodes as partials (scale-out: several partitions, one node). */
  drainPartials(): { partials: NodePartial[]; alerts: (AlertMsg | StaleFeedMsg)[]; rejected: RejectedMsg[] } {
    const nodes = this.takeChanged();
    const partials = nodes.map((n) => partialOf(n, this.reportingCurrency, UNPRICED_REASONS));
    const alerts = this.outAlerts;
    const rejected = this.outRejected;
    this.outAlerts = [];
    this.outRejected = [];
    return { partials, alerts, rejected };
  }

  private takeChanged(): Node[] {
    const nodes = this.outNodes;
    this.outNodes = [];
    for (const n of nodes) n.outPending = false;
    return nodes.sort(byKey);
  }

  snapshot(): ExposureMsg[] {
    return this.cube.kept().map((n) => exposureOf(n, this.reportingCurrency, UNPRICED_REASONS));
  }

  partials(): NodePartial[] {
    return this.cube.kept().map((n) => partialOf(n, this.reportingCurrency, UNPRICED_REASONS));
  }

  openAlerts(): AlertMsg[] {
    return this.limitBook.openAlerts();
  }

  /**
   * After a rebuild, before going live: brings what operations were last told about each feed
   * (`published`: the latest stale-feed state per underlying on the alerts topic; absent = never
   * raised) in line with the rebuilt state. A rebuild applies history with its outputs dropped, so
   * a feed that went stale, or fresh again, while no instance was running would otherwise never be
   * announced, and its next change would announce the wrong transition. Queues one event per
   * feed that differs (out with the next drain) and returns them; changes no state.
   */
  reconcileFeeds(published: ReadonlyMap<string, 'raised' | 'cleared'>): StaleFeedMsg[] {
    const t = this.clock ? Math.max(this.valuationMs, this.clock.now()) : this.eventMs;
    const out: StaleFeedMsg[] = [];
    for (const u of this.undList)
      if (u.hasSpot && u.stale !== (published.get(u.name) === 'raised')) out.push(this.announceFeed(u, t));
    return out;
  }

  utilizations(): { limitId: string; utilization: number }[] {
    return this.limitBook.utilizations();
  }

  limits(): LimitView[] {
    return this.limitBook.views();
  }

  feeds(): { underlying: string; lastTickMs: number; stale: boolean }[] {
    const out: { underlying: string; lastTickMs: number; stale: boolean }[] = [];
    for (const u of this.undList)
      if (u.hasSpot) out.push({ underlying: u.name, lastTickMs: u.lastTickMs, stale: u.stale });
    return out.sort((a, b) => (a.underlying < b.underlying ? -1 : a.underlying > b.underlying ? 1 : 0));
  }

  stats(): EngineStats {
    const unpriced: Record<string, number> = {};
    const firm = this.cube.getNode('firm');
    if (firm) {
      for (let r = 0; r < UNPRICED_REASONS.length; r++) {
        const c = firm.unpriced[r] as number;
        if (c > 0) unpriced[UNPRICED_REASONS[r] as string] = c;
      }
    }
    let instruments = 0;
    for (let i = 0; i < this.inst.count; i++)
      if ((this.instHoldings[i] as Holding[]).length > 0) instruments++;
    return {
      positions: this.liveTrades,
      instruments,
      unpriced,
      revaluations: this.totalRevaluations,
      valuationMs: this.valuationMs,
    };
  }

  /** Current valuation time (epoch ms): the event clock, or the clock at the last input. */
  get now(): number {
    return this.valuationMs;
  }

  /**
   * A full re-sum from the live trades, one by one, from the per-unit results of their instruments:
   * the reference the incremental node sums must equal (tests and a consistency probe).
   */
  resum(): Map<string, { values: number[]; positions: number }> {
    const acc = new Map<string, { values: number[]; positions: number }>();
    const v = new Float64Array(METRIC_COUNT);
    for (const rec of this.trades.values()) {
      const live = rec.live;
      if (!live) continue;
      const h = live.holding;
      const reason = this.reasonOf(h);
      if (reason === PRICED)
        this.contribution(
          h.inst,
          live.qm,
          live.cost,
          this.fxRate((h.und.ref as RefData).currency) as number,
          v,
        );
      else v.fill(0);
      const set = this.cube.nodeSet(h.desk, h.book, h.und.name, this.inst.tenor[h.inst] as number);
      for (const n of set.nodes) {
        let e = acc.get(n.key);
        if (!e) {
          e = { values: new Array<number>(METRIC_COUNT).fill(0), positions: 0 };
          acc.set(n.key, e);
        }
        for (let k = 0; k < METRIC_COUNT; k++) e.values[k] = (e.values[k] as number) + (v[k] as number);
        e.positions += 1;
      }
    }
    return acc;
  }

  // ------------------------------------------------------------------ input processing

  private process(msg: InputMsg, source: string, raw: string | undefined): Outcome {
    const problem = this.domainProblem(msg);
    if (problem !== null) {
      this.reject(problem, source, raw ?? JSON.stringify(msg));
      this.observer?.input?.(msg.type, 'rejected');
      return 'rejected';
    }
    this.begin(msOf(msg.ts));
    let outcome: Outcome;
    switch (msg.type) {
      case 'underlying':
        outcome = this.onUnderlying(msg);
        break;
      case 'spot':
        outcome = this.onSpot(msg);
        break;
      case 'vol-surface':
        outcome = this.onSurface(msg);
        break;
      case 'curve':
        outcome = this.onCurve(msg);
        break;
      case 'trade':
        outcome = this.onTrade(msg);
        break;
      case 'limit':
        outcome = this.onLimit(msg);
        break;
      case 'limit-remove':
        outcome = this.onLimitRemove(msg);
        break;
    }
    this.finish();
    this.observer?.input?.(msg.type, outcome);
    return outcome;
  }

  /** Rejections that need the engine's state (the schema cannot know them). */
  private domainProblem(msg: InputMsg): string | null {
    if (msg.type !== 'trade') return null;
    const rec = this.trades.get(msg.tradeId);
    if (!rec || msg.version <= rec.version || rec.underlying === msg.underlying) return null;
    if (msg.action === 'cancel') {
      return `trade.underlying ${msg.underlying} does not match trade ${msg.tradeId}, which is on ${rec.underlying}`;
    }
    return `trade.underlying may not change from ${rec.underlying} to ${msg.underlying} (trade ${msg.tradeId}): the underlying is the bus key; cancel and book a new trade instead`;
  }

  /** A new input: its own changes, checks and alerts start empty; then time moves on (advance). */
  private begin(tsMs: number): void {
    this.seq += 1;
    this.checkNodes.length = 0;
    this.inputAlerts = [];
    this.inputRevaluations = 0;
    this.inputChangedNodes = 0;
    this.advance(tsMs);
  }

  /** Valuation time moves on; within a run (ingestSpots) the run's changes keep accumulating. */
  private advance(tsMs: number): void {
    // valuation time never goes backwards, whatever the clock does
    const t = this.clock
      ? Math.max(this.valuationMs, this.clock.now())
      : (this.eventMs = Math.max(this.eventMs, tsMs));
    this.valuationMs = t;
    this.markSeq += 1;
    this.sweepStale(t);
  }

  private finish(): void {
    this.flush();
    const t = this.valuationMs;
    const alerts = this.inputAlerts;
    for (const n of this.checkNodes) {
      if (this.limitBook.watches(n.key)) alerts.push(...this.limitBook.check(n.key, valuesOf(n), t));
    }
    alerts.sort((a, b) => (a.limitId < b.limitId ? -1 : a.limitId > b.limitId ? 1 : 0));
    for (const a of alerts) {
      this.outAlerts.push(a);
      this.observer?.alert?.(a);
    }
    this.inputAlerts = [];
    this.checkNodes.length = 0;
    this.totalRevaluations += this.inputRevaluations;
    if (this.inputRevaluations > 0) this.observer?.revaluations?.(this.inputRevaluations);
    if (this.inputChangedNodes > 0) this.observer?.exposuresChanged?.(this.inputChangedNodes);
  }

  /** A record that failed to decode or validate: dead-lettered, counted under the type it claims. */
  private rejectUndecodable(reason: string, source: string, raw: string): Outcome {
    this.reject(reason, source, raw);
    this.observer?.input?.(typeOfRaw(raw), 'rejected');
    return 'rejected';
  }

  private reject(reason: string, source: string, raw: string): void {
    const t = this.clock ? Math.max(this.valuationMs, this.clock.now()) : this.eventMs;
    const r: RejectedMsg = { type: 'rejected', reason, source, raw, ts: formatTs(t) };
    this.outRejected.push(r);
    this.observer?.rejected?.(r);
  }

  private und(name: string): Underlying {
    let u = this.unds.get(name);
    if (!u) {
      u = new Underlying(name, this.undList.length);
      this.unds.set(name, u);
      this.undList.push(u);
    }
    return u;
  }

  private onUnderlying(msg: UnderlyingMsg): Outcome {
    const u = this.und(msg.underlying);
    const ts = msOf(msg.ts);
    if (ts < u.refTsMs) return 'duplicate';
    const old = u.ref;
    if (old) {
      this.byCurrency.get(old.currency)?.delete(u);
      if (old.base) this.byFxBase.get(old.base)?.delete(u);
    }
    const ref: RefData = {
      kind: msg.kind,
      currency: msg.currency,
      dividendYield: msg.dividendYield,
      dividends: msg.dividends
        .map((d) => ({ exMs: msOf(d.exDate), amount: d.amount }))
        .sort((a, b) => a.exMs - b.exMs),
      base: msg.kind === 'fx' ? msg.underlying.slice(0, 3) : undefined,
    };
    u.ref = ref;
    u.refTsMs = ts;
    setOf(this.byCurrency, ref.currency).add(u);
    if (ref.base) setOf(this.byFxBase, ref.base).add(u);
    for (const i of u.instruments) this.markDirty(i);
    this.repriceDirty();
    return 'accepted';
  }

  private onSpot(msg: SpotMsg): Outcome {
    const u = this.und(msg.underlying);
    const ts = msOf(msg.ts);
    // an older tick than the one held is out of order on its key: counted, never applied
    if (ts < u.lastTickMs) return 'duplicate';
    u.spot = msg.price;
    u.hasSpot = true;
    u.lastTickMs = ts;
    const t = this.valuationMs;
    const nowStale = t - ts > this.staleAfterMs;
    // the repricing below refreshes the stale flag of every position on this feed
    if (u.stale !== nowStale) this.feedEvent(u, nowStale, t, false);
    if (!nowStale && !u.inHeap) this.heap.push(ts + this.staleAfterMs, u);
    const converts = this.convertedBy(msg.underlying);
    if (converts !== undefined) this.fxCache.delete(converts);
    for (const i of u.instruments) this.markDirty(i);
    this.repriceDirty();
    // a conversion pair: every position in that currency is rescaled, no option revalued
    if (converts !== undefined) this.rescaleCurrency(converts);
    return 'accepted';
  }

  /** The currency whose conversion into the reporting one a pair's spot sets (CCYREP or REPCCY). */
  private convertedBy(name: string): string | undefined {
    if (name.length !== 6) return undefined;
    const rep = this.reportingCurrency;
    const a = name.slice(0, 3);
    const b = name.slice(3);
    if (b === rep && a !== rep) return a;
    if (a === rep && b !== rep) return b;
    return undefined;
  }

  private onSurface(msg: VolSurfaceMsg): Outcome {
    const u = this.und(msg.underlying);
    const ts = msOf(msg.ts);
    if (ts < u.surfaceTsMs) return 'duplicate';
    u.surface = {
      expiriesMs: msg.expiries.map(msOf),
      strikes: msg.strikes.slice(),
      vols: msg.vols.map((r) => r.slice()),
      atMs: Number.NaN,
      pillarTaus: [],
    };
    u.surfaceTsMs = ts;
    for (const i of u.instruments) if (this.inst.isOption[i] === 1) this.markDirty(i);
    this.repriceDirty();
    return 'accepted';
  }

  private onCurve(msg: CurveMsg): Outcome {
    const ts = msOf(msg.ts);
    const old = this.curves.get(msg.currency);
    if (old && ts < old.tsMs) return 'duplicate';
    this.curves.set(msg.currency, { tenors: msg.tenors.slice(), zeroRates: msg.zeroRates.slice(), tsMs: ts });
    // options quoted in it (discounting, carry and dividend PVs) and fx options based in it (foreign rate)
    for (const set of [this.byCurrency.get(msg.currency), this.byFxBase.get(msg.currency)]) {
      if (!set) continue;
      for (const u of set) for (const i of u.instruments) if (this.inst.isOption[i] === 1) this.markDirty(i);
    }
    this.repriceDirty();
    return 'accepted';
  }

  private onTrade(msg: TradeMsg): Outcome {
    let rec = this.trades.get(msg.tradeId);
    if (rec && msg.version <= rec.version) return 'duplicate';
    if (!rec) {
      rec = { version: msg.version, underlying: msg.underlying, live: null };
      this.trades.set(msg.tradeId, rec);
    }
    rec.version = msg.version;
    const old = rec.live;
    if (msg.action === 'cancel') {
      if (old) {
        rec.live = null;
        this.liveTrades -= 1;
        this.removeFromHolding(old);
        this.updateHolding(old.holding);
      }
      return 'accepted';
    }
    // new, or amend (an amend of an unknown trade acts as new; a new above a cancel books again)
    const u = this.und(msg.underlying);
    const ikey = this.inst.key(msg.underlying, msg.instrument);
    let i = this.inst.find(ikey);
    if (i === undefined) {
      i = this.inst.add(ikey, u.index, msg.instrument);
      this.instHoldings[i] = [];
      u.instruments.push(i);
    }
    const hkey = `${i}\u0000${msg.desk}\u0000${msg.book}`;
    let h = this.holdings.get(hkey);
    if (!h) {
      h = new Holding(hkey, i, u, msg.desk, msg.book, this.slab.take());
      this.holdings.set(hkey, h);
      const list = this.instHoldings[i] as Holding[];
      h.slot = list.length;
      list.push(h);
    }
    const qm = msg.quantity * msg.instrument.multiplier;
    const live: LiveTrade = { holding: h, qm, cost: qm * msg.price };
    if (old) this.removeFromHolding(old);
    else this.liveTrades += 1;
    rec.live = live;
    h.addTrade(live.qm, live.cost, 1);
    if (old && old.holding !== h) this.updateHolding(old.holding);
    if (this.inst.valuedAt[i] === this.valuationMs) {
      // its per-unit results are those of this very valuation time: only this holding moves
      this.updateHolding(h);
    } else {
      // priced now, so that every holding on it (this trade's and the others') stands on one valuation
      this.markDirty(i);
      this.repriceDirty();
    }
    return 'accepted';
  }

  private removeFromHolding(t: LiveTrade): void {
    t.holding.addTrade(t.qm, t.cost, -1);
  }

  private onLimit(msg: LimitMsg): Outcome {
    // scopes join and leave node sets below: nothing may be staged against the old sets
    this.flush();
    const before = this.namedBy.get(msg.limitId);
    const { scopeKey } = this.limitBook.set(msg);
    let node: Node;
    if (before !== scopeKey) {
      const keptBefore = this.cube.getNode(scopeKey)?.kept ?? false;
      const named = this.cube.nameScope(msg.scope);
      node = named.node;
      if (named.joined) this.fillScope(node);
      this.namedBy.set(msg.limitId, scopeKey);
      if (before !== undefined) this.unname(before);
      // a scope that starts to exist (or to sum positions) is published
      if (named.joined || !keptBefore) this.touch(node);
    } else {
      node = this.cube.getNode(scopeKey) as Node;
    }
    // checked at once, also when a replacement kept its level
    this.pushCheck(node);
    return 'accepted';
  }

  /** limitId -> the scope key it is counted in, so a replacement on the same scope counts once. */
  private readonly namedBy = new Map<string, string>();

  private onLimitRemove(msg: LimitRemoveMsg): Outcome {
    this.flush();
    if (!this.limitBook.has(msg.limitId)) return 'duplicate';
    const { alerts, scopeKey } = this.limitBook.remove(msg.limitId, this.valuationMs);
    this.inputAlerts.push(...alerts);
    this.namedBy.delete(msg.limitId);
    if (scopeKey !== undefined) this.unname(scopeKey);
    return 'accepted';
  }

  private unname(scopeKey: string): void {
    const n = this.cube.unnameScope(scopeKey);
    if (n && !n.kept && n.wasKept) this.touch(n);
  }

  /** A scope that just joined the node sets takes the current contributions of its holdings. */
  private fillScope(node: Node): void {
    for (const h of this.holdings.values()) {
      const set = h.set;
      if (!set || !set.nodes.includes(node)) continue;
      applyToNode(node, ZERO_VEC, h.vec, 0, h.appliedTrades, EMPTY, h.reason, false, h.stale);
    }
  }

  // ------------------------------------------------------------------ staleness

  private sweepStale(t: number): void {
    const heap = this.heap;
    while (heap.peekKey() < t) {
      const u = heap.pop() as Underlying;
      const deadline = u.lastTickMs + this.staleAfterMs;
      if (deadline < t) {
        if (!u.stale) this.feedEvent(u, true, t);
      } else {
        heap.push(deadline, u);
      }
    }
  }

  private feedEvent(u: Underlying, stale: boolean, t: number, refresh = true): void {
    u.stale = stale;
    this.announceFeed(u, t);
    // the stale flag of the nodes its priced positions sit in (no revaluation)
    if (refresh)
      for (const i of u.instruments) for (const h of this.instHoldings[i] as Holding[]) this.updateHolding(h);
  }

  /** Queues the stale-feed event that states the feed's current flag. */
  private announceFeed(u: Underlying, t: number): StaleFeedMsg {
    const e: StaleFeedMsg = {
      type: 'stale-feed',
      underlying: u.name,
      state: u.stale ? 'raised' : 'cleared',
      lastTick: formatTs(u.lastTickMs),
      ts: formatTs(t),
    };
    this.outAlerts.push(e);
    this.observer?.staleFeed?.(e);
    return e;
  }

  // ------------------------------------------------------------------ revaluation

  private markDirty(i: number): void {
    if (this.inst.dirtySeq[i] === this.markSeq) return;
    this.inst.dirtySeq[i] = this.markSeq;
    this.dirty.push(i);
  }

  private ensureBatch(n: number): void {
    if (n <= this.batchCap) return;
    const cap = Math.max(64, n, this.batchCap * 2);
    this.batch = allocOptionBatch(cap);
    this.out = allocGreeksBatch(cap);
    this.batchInst = new Int32Array(cap);
    this.batchDivRho = new Float64Array(cap);
    this.batchCap = cap;
  }

  /** Prices every dirty instrument once, then moves each of its holdings' contributions. */
  private repriceDirty(): void {
    const dirty = this.dirty;
    if (dirty.length === 0) return;
    const t = this.valuationMs;
    const I = this.inst;
    this.ensureBatch(dirty.length);
    const b = this.batch;
    let n = 0;
    let revalued = 0;
    for (const i of dirty) {
      if ((this.instHoldings[i] as Holding[]).length === 0) continue;
      I.valuedAt[i] = t;
      const u = this.undList[I.underlying[i] as number] as Underlying;
      const isOption = I.isOption[i] === 1;
      // the bucket moves with time whether or not the option can be priced
      if (isOption) I.tenor[i] = TENORS.indexOf(tenorBucket(I.expiryMs[i] as number, t));
      const ref = u.ref;
      if (!ref) {
        I.status[i] = R_NO_REFERENCE;
        continue;
      }
      if (!u.hasSpot) {
        I.status[i] = R_NO_SPOT;
        continue;
      }
      const s = u.spot;
      I.spot[i] = s;
      if (!isOption) {
        I.status[i] = PRICED;
        I.futureLinear[i] = ref.kind === 'future' ? 1 : 0;
        I.price[i] = s;
        I.delta[i] = 1;
        I.gamma[i] = 0;
        I.vega[i] = 0;
        I.theta[i] = 0;
        I.rho[i] = 0;
        revalued++;
        continue;
      }
      const expiry = I.expiryMs[i] as number;
      const tau = yearFraction(t, expiry);
      if (tau <= 0) {
        // expired: intrinsic on the quoted spot, zero Greeks, until a trade event removes it
        I.status[i] = PRICED;
        I.price[i] = intrinsic(
          I.right[i] as number,
          I.payoff[i] as number,
          s,
          I.strike[i] as number,
          I.cashAmount[i] as number,
        );
        I.delta[i] = 0;
        I.gamma[i] = 0;
        I.vega[i] = 0;
        I.theta[i] = 0;
        I.rho[i] = 0;
        revalued++;
        continue;
      }
      const curve = this.curves.get(ref.currency);
      const baseCurve = ref.base !== undefined ? this.curves.get(ref.base) : undefined;
      if (!curve || (ref.base !== undefined && !baseCurve)) {
        I.status[i] = R_NO_CURVE;
        continue;
      }
      const surf = u.surface;
      if (!surf) {
        I.status[i] = R_NO_VOL;
        continue;
      }
      const r = zeroRate(curve, tau);
      let spotIn = s;
      let carry: number;
      let divRho = 0;
      let rhoCarry = 1;
      if (ref.kind === 'equity') {
        carry = r - ref.dividendYield;
        // escrowed discrete dividends: S* = S - sum of PV(div) with valuation < exDate <= expiry
        for (const d of ref.dividends) {
          if (d.exMs <= t) continue;
          if (d.exMs > expiry) break;
          const ti = yearFraction(t, d.exMs);
          const pv = d.amount * discountFactor(curve, ti);
          spotIn -= pv;
          divRho += ti * pv;
        }
        if (!(spotIn > 0)) {
          // dividends worth more than the share: the reference data cannot be right
          I.status[i] = R_NO_REFERENCE;
          continue;
        }
      } else if (ref.kind === 'fx') {
        carry = r - zeroRate(baseCurve as Curve, tau);
      } else {
        carry = 0;
        rhoCarry = 0;
      }
      b.right[n] = I.right[i] as number;
      b.payoff[n] = I.payoff[i] as number;
      b.spot[n] = spotIn;
      b.strike[n] = I.strike[i] as number;
      b.tau[n] = tau;
      this.pillarsAt(surf, t);
      b.vol[n] = surfaceVol(surf, I.strike[i] as number, tau);
      b.rate[n] = r;
      b.carry[n] = carry;
      b.cashAmount[n] = I.cashAmount[i] as number;
      b.rhoCarry[n] = rhoCarry;
      this.batchInst[n] = i;
      this.batchDivRho[n] = divRho;
      n++;
    }
    if (n > 0) {
      b.n = n;
      const o = this.out;
      priceBatch(b, o, 0, n);
      for (let j = 0; j < n; j++) {
        const i = this.batchInst[j] as number;
        const price = o.price[j] as number;
        const delta = o.delta[j] as number;
        const gamma = o.gamma[j] as number;
        const vega = o.vega[j] as number;
        const theta = o.theta[j] as number;
        // rho with the dividend PVs moving with the curve: + delta x dS*/dr x 0.01, dS*/dr = sum tau_i PV_i
        const rho = (o.rho[j] as number) + delta * (this.batchDivRho[j] as number) * 0.01;
        if (!(
          Number.isFinite(price) &&
          Number.isFinite(delta) &&
          Number.isFinite(gamma) &&
          Number.isFinite(vega) &&
          Number.isFinite(theta) &&
          Number.isFinite(rho)
        )) {
          // never publish a non-finite number: the quant core promises finite results for valid
          // inputs, so this is a defect, and the position is left out rather than valued wrongly
          I.status[i] = R_NO_VOL;
          continue;
        }
        I.status[i] = PRICED;
        I.price[i] = price;
        I.delta[i] = delta;
        I.gamma[i] = gamma;
        I.vega[i] = vega;
        I.theta[i] = theta;
        I.rho[i] = rho;
      }
      revalued += n;
    }
    this.inputRevaluations += revalued;
    for (const i of dirty) {
      const list = this.instHoldings[i] as Holding[];
      // updateHolding may remove a holding from the list: walk it backwards
      for (let k = list.length - 1; k >= 0; k--) this.updateHolding(list[k] as Holding);
    }
    dirty.length = 0;
  }

  /** Pillar year fractions at t, computed once per surface and valuation time. */
  private pillarsAt(s: Surface, t: number): void {
    if (s.atMs === t) return;
    s.pillarTaus = s.expiriesMs.map((e) => yearFraction(t, e));
    s.atMs = t;
  }

  private rescaleCurrency(ccy: string): void {
    const set = this.byCurrency.get(ccy);
    if (!set) return;
    for (const u of set)
      for (const i of u.instruments) for (const h of this.instHoldings[i] as Holding[]) this.updateHolding(h);
  }

  /** Conversion rate of a currency into the reporting one: CCYREP multiplies, REPCCY divides. */
  private fxRate(ccy: string): number | undefined {
    const rep = this.reportingCurrency;
    if (ccy === rep) return 1;
    const cached = this.fxCache.get(ccy);
    if (cached !== undefined) return cached ?? undefined;
    // not cached: also recompute after any spot of either pair (rescaleCurrency drops the entry)
    const direct = this.unds.get(ccy + rep);
    let rate: number | null = null;
    if (direct?.hasSpot) rate = direct.spot;
    else {
      const inverse = this.unds.get(rep + ccy);
      if (inverse?.hasSpot) rate = 1 / inverse.spot;
    }
    this.fxCache.set(ccy, rate);
    return rate ?? undefined;
  }

  private reasonOf(h: Holding): number {
    if (h.trades === 0) return EMPTY;
    const st = this.inst.status[h.inst] as number;
    if (st !== PRICED) return st;
    return this.fxRate((h.und.ref as RefData).currency) === undefined ? R_NO_FX : PRICED;
  }

  /** Contribution of a priced position of size qm and cost (underlying's currency), in reporting currency. */
  private contribution(i: number, qm: number, cost: number, x: number, v: Float64Array): void {
    const I = this.inst;
    const p = I.price[i] as number;
    const s = I.spot[i] as number;
    const d = (I.delta[i] as number) * qm;
    const g = (I.gamma[i] as number) * qm;
    const pv = I.futureLinear[i] === 1 ? qm * s - cost : p * qm;
    const pnl = I.futureLinear[i] === 1 ? pv : p * qm - cost;
    v[M_PV] = pv * x;
    v[M_PNL] = pnl * x;
    v[M_DELTA] = d;
    v[M_CASH_DELTA] = d * s * x;
    v[M_GAMMA] = g;
    v[M_CASH_GAMMA] = ((g * s * s) / 100) * x;
    v[M_VEGA] = (I.vega[i] as number) * qm * x;
    v[M_THETA] = (I.theta[i] as number) * qm * x;
    v[M_RHO] = (I.rho[i] as number) * qm * x;
  }

  /** Recomputes a holding's contribution and moves its nodes by the difference. */
  private updateHolding(h: Holding): void {
    const reason = this.reasonOf(h);
    const v = this.scratch;
    if (reason === PRICED)
      this.contribution(h.inst, h.qm, h.cost, this.fxRate((h.und.ref as RefData).currency) as number, v);
    else v.fill(0);
    const stale = reason === PRICED && h.und.stale;
    const tenor = this.inst.tenor[h.inst] as number;
    // node sets are updated in place when limit scopes come and go, so one found before stays right
    const set =
      reason === EMPTY
        ? null
        : h.set !== null && h.set.tenor === tenor
          ? h.set
          : this.cube.nodeSet(h.desk, h.book, h.und.name, tenor);
    const trades = h.trades;
    if (
      set === h.set &&
      reason === h.reason &&
      stale === h.stale &&
      trades === h.appliedTrades &&
      sameVec(v, h.vec)
    )
      return;
    if (set === h.set && set !== null) {
      this.stage(set, h.vec, v, h.appliedTrades, trades, h.reason, reason, h.stale, stale);
    } else {
      if (h.set) this.stage(h.set, h.vec, ZERO_VEC, h.appliedTrades, 0, h.reason, EMPTY, h.stale, false);
      if (set) this.stage(set, ZERO_VEC, v, 0, trades, EMPTY, reason, false, stale);
    }
    h.set = set;
    h.vec.set(v);
    h.reason = reason;
    h.stale = stale;
    h.appliedTrades = trades;
    if (trades === 0) this.dropHolding(h);
  }

  /** Adds a holding's change of contribution to its node set's staged differences. */
  private stage(
    set: NodeSet,
    oldVec: Float64Array,
    newVec: Float64Array,
    oldTrades: number,
    newTrades: number,
    oldReason: number,
    newReason: number,
    oldStale: boolean,
    newStale: boolean,
  ): void {
    const g = set.group;
    const p = g.pending;
    if (!p.staged) {
      p.staged = true;
      this.stagedGroups.push(g);
    }
    const pv = p.vec;
    for (let k = 0; k < METRIC_COUNT; k++)
      pv[k] = (pv[k] as number) + ((newVec[k] as number) - (oldVec[k] as number));
    p.positions += newTrades - oldTrades;
    if (oldReason >= 0) p.unpriced[oldReason] = (p.unpriced[oldReason] as number) - oldTrades;
    if (newReason >= 0) p.unpriced[newReason] = (p.unpriced[newReason] as number) + newTrades;
    p.stale += (newStale ? 1 : 0) - (oldStale ? 1 : 0);
  }

  /** Applies the staged differences: groups into their nodes, then one update per node. */
  private flush(): void {
    const sets = this.stagedGroups;
    if (sets.length === 0) return;
    const nodes = this.stagedNodes;
    for (const s of sets) {
      for (const n of s.nodes) {
        if (!n.pending.staged) {
          n.pending.staged = true;
          nodes.push(n);
        }
        s.pending.addInto(n.pending);
      }
      s.pending.clear();
    }
    sets.length = 0;
    for (const n of nodes) {
      applyPending(n, n.pending);
      n.pending.clear();
      this.touch(n);
    }
    nodes.length = 0;
  }

  private readonly stagedGroups: NodeGroup[] = [];
  private readonly stagedNodes: Node[] = [];

  private dropHolding(h: Holding): void {
    this.holdings.delete(h.key);
    const list = this.instHoldings[h.inst] as Holding[];
    const last = list.pop() as Holding;
    if (last !== h) {
      list[h.slot] = last;
      last.slot = h.slot;
    }
    h.slot = -1;
    this.slab.give(h.vec);
  }

  /** Marks a node changed by the current input: published at the next drain, its limits checked. */
  private touch(n: Node): void {
    n.asOfMs = this.valuationMs;
    n.wasKept = n.kept;
    if (!n.outPending) {
      n.outPending = true;
      this.outNodes.push(n);
    }
    if (n.changedSeq !== this.seq) {
      n.changedSeq = this.seq;
      this.inputChangedNodes += 1;
      this.checkNodes.push(n);
    }
  }

  private pushCheck(n: Node): void {
    if (n.changedSeq !== this.seq) {
      n.changedSeq = this.seq;
      this.checkNodes.push(n);
    }
  }

  /** The exact guard against drift: every node re-summed from its holdings' contributions. */
  private resyncSums(): void {
    for (const n of this.cube.all()) n.clearSums();
    for (const h of this.holdings.values()) {
      if (!h.set) continue;
      for (const n of h.set.nodes) for (let k = 0; k < METRIC_COUNT; k++) n.add(k, h.vec[k] as number);
    }
  }
}

function applyToNode(
  n: Node,
  oldVec: Float64Array,
  newVec: Float64Array,
  oldTrades: number,
  newTrades: number,
  oldReason: number,
  newReason: number,
  oldStale: boolean,
  newStale: boolean,
): void {
  for (let k = 0; k < METRIC_COUNT; k++) {
    const d = (newVec[k] as number) - (oldVec[k] as number);
    if (d !== 0) n.add(k, d);
  }
  n.positions += newTrades - oldTrades;
  if (oldReason >= 0) n.unpriced[oldReason] = (n.unpriced[oldReason] as number) - oldTrades;
  if (newReason >= 0) n.unpriced[newReason] = (n.unpriced[newReason] as number) + newTrades;
  n.staleCount += (newStale ? 1 : 0) - (oldStale ? 1 : 0);
  if (n.positions === 0) n.clearSums();
}

function applyPending(n: Node, p: Pending): void {
  for (let k = 0; k < METRIC_COUNT; k++) {
    const d = p.vec[k] as number;
    if (d !== 0) n.add(k, d);
  }
  n.positions += p.positions;
  for (let r = 0; r < p.unpriced.length; r++)
    n.unpriced[r] = (n.unpriced[r] as number) + (p.unpriced[r] as number);
  n.staleCount += p.stale;
  if (n.positions === 0) n.clearSums();
}

function sameVec(a: Float64Array, b: Float64Array): boolean {
  for (let k = 0; k < METRIC_COUNT; k++) if (a[k] !== b[k]) return false;
  return true;
}

function valuesOf(n: Node): MetricValues {
  const empty = n.positions === 0;
  const v = (k: number): number => (empty ? 0 : n.value(k));
  const out = {} as Record<Metric, number | null>;
  METRICS.forEach((m, k) => {
    out[m] = (k === M_DELTA || k === M_GAMMA) && !n.hasUnderlying ? null : v(k);
  });
  return out;
}

function byKey(a: Node, b: Node): number {
  return a.key < b.key ? -1 : a.key > b.key ? 1 : 0;
}

function setOf<K, V>(m: Map<K, Set<V>>, k: K): Set<V> {
  let s = m.get(k);
  if (!s) {
    s = new Set<V>();
    m.set(k, s);
  }
  return s;
}

/** The message type of a raw record that failed to decode, for counting; 'unknown' otherwise. */
function typeOfRaw(raw: string): string {
  try {
    const o: unknown = JSON.parse(raw);
    if (o !== null && typeof o === 'object' && typeof (o as { type?: unknown }).type === 'string') {
      return (o as { type: string }).type;
    }
  } catch {
    // not JSON: counted as unknown
  }
  return 'unknown';
}
