// The engine over a bus, transport-agnostic: the embedded default drives it over MemoryBus and the
// Kafka runner over KafkaBus, so a behaviour proven in memory is the behaviour on the broker.
//
// Per batch: plan (conflate spots), ingest, drain, publish. Events that risk control must see
// (alerts, stale-feed, rejected) are published before the handler resolves, in the order the
// engine produced them: a transport that commits after the handler therefore commits no input
// whose events are not on the bus. Exposures are latest-wins state, coalesced per node over the
// publish interval: by default the handler does not wait for the next exposure flush (waiting
// would add up to one interval to every later tick, because no further batch is delivered while a
// handler runs); a lost pending flush is repaired by the next change of the node, the decay clock,
// or the full snapshot a restarted engine publishes after rebuilding. A transport that commits
// offsets calls `handleUntilAcked` instead: the batch is kept and applied at the next flush (spots
// conflate over the interval), the call resolves at once (the next batch is fetched meanwhile)
// with a promise of that flush's acknowledgement, and the transport commits after it. A failed
// flush keeps its events and exposures queued and is retried one interval later.
import { INPUT_TOPICS, TOPICS } from '@keelson/shared-types';
import type { AlertMsg, DecodeResult, ExposureMsg, RejectedMsg, StaleFeedMsg } from '@keelson/shared-types';
import type { Bus, BusRecord, OutRecord } from '@keelson/bus';
import { planBatch } from './conflate.ts';
import { LatencyWindow } from './latency.ts';

export type Signal = AlertMsg | StaleFeedMsg;
export type IngestOutcome = 'accepted' | 'duplicate' | 'rejected';

/** A changed node, read when its flush publishes it (RiskEngine's ExposureView). */
export interface ExposureSource {
  readonly key: string;
  readonly underlying: string | undefined;
  exposure(): ExposureMsg;
  /** Exactly JSON.stringify(exposure()). */
  json(): string;
}

/** The part of RiskEngine the runner drives (structural, so tests can hand in a fake). */
export interface RunnerEngine {
  /** `decoded` is decodeInput(raw), done once by the batch plan. */
  ingest(raw: string, source: string, decoded?: DecodeResult): IngestOutcome;
  /** Optional, preferred when present: a run of spots applied as one move (RiskEngine.ingestSpots). */
  ingestSpots?(items: readonly { raw: string; source: string; decoded?: DecodeResult }[]): IngestOutcome[];
  revalueAll(): void;
  drain(): { exposures: ExposureMsg[]; alerts: Signal[]; rejected: RejectedMsg[] };
  /**
   * Optional, preferred when present: the changed nodes as sources read at flush time, so that
   * exposures superseded within one publish interval are never built nor serialised.
   */
  drainChanged?(): { changed: ExposureSource[]; alerts: Signal[]; rejected: RejectedMsg[] };
  snapshot(): ExposureMsg[];
}

interface Drained {
  exposures?: ExposureMsg[];
  changed?: ExposureSource[];
  alerts: Signal[];
  rejected: RejectedMsg[];
}

type PendingExposure = ExposureMsg | ExposureSource;

/** The part of KeelsonMetrics the runner feeds. */
export interface RunnerMetrics {
  tickToPublish(spotTsMs: number, publishedMs: number): void;
  busToPublish(busTsMs: number, publishedMs: number): void;
  batchProcessed(seconds: number): void;
}

export interface Published {
  exposures: ExposureMsg[];
  alerts: Signal[];
  rejected: RejectedMsg[];
}

export interface RunnerOptions {
  engine: RunnerEngine;
  bus: Bus;
  inputTopics?: readonly string[];
  outputTopics?: { exposures: string; alerts: string; rejected: string };
  /** Exposures are coalesced per node and published at most this often; 0 publishes every batch. Default 100. */
  publishIntervalMs?: number;
  /**
   * When below publishIntervalMs, the interval adapts between the two: after each flush the next
   * one waits flush cost / PUBLISH_SHARE (publishing takes about a fifth of the time at most), so
   * under light load exposures leave within a few ms and under heavy load the coalescing widens
   * up to publishIntervalMs. Default: publishIntervalMs (a fixed interval).
   */
  minPublishIntervalMs?: number;
  /** Calls engine.revalueAll() this often (theta, tenor buckets, expiries, staleness); 0 = never (event clock). */
  decayIntervalMs?: number;
  /** Wall clock, epoch ms: publish times, tick-to-publish and bus-to-publish latency. Default Date.now. */
  now?: () => number;
  metrics?: RunnerMetrics;
  /** The engine's observer: conflated spots are counted on it as accepted inputs. */
  observer?: { input?(type: string, outcome: IngestOutcome, count?: number): void };
  /** After each acknowledged publish: feeds the SSE hub and the alert log. */
  onPublished?: (p: Published) => void;
  /** Failures that are not the input's fault (an engine bug, a decay run that threw). */
  onError?: (err: unknown, context: string) => void;
  /** Samples kept for the live percentiles; default 16 384. */
  latencyWindow?: number;
}

export interface RunnerStats {
  batches: number;
  records: number;
  spots: number;
  conflated: number;
  accepted: number;
  duplicates: number;
  rejected: number;
  exposuresPublished: number;
  alertsPublished: number;
  rejectedPublished: number;
  decayRuns: number;
  internalErrors: number;
}

/**
 * Accepted spots of one applied batch, or waiting for a flush: columns rather than an object per
 * tick (there are hundreds of thousands a second in a catch-up), kept and refilled rather than
 * allocated per batch.
 */
class TickLog {
  length = 0;
  underlying: string[] = [];
  tickTsMs = new Float64Array(1024);
  /** NaN: the transport gave no timestamp. */
  busTsMs = new Float64Array(1024);

  push(underlying: string, tickTsMs: number, busTsMs: number): void {
    const n = this.length;
    if (n === this.tickTsMs.length) this.grow(2 * n);
    this.underlying[n] = underlying;
    this.tickTsMs[n] = tickTsMs;
    this.busTsMs[n] = busTsMs;
    this.length = n + 1;
  }

  /** Empty, keeping its room (the underlying names it still refers to are the engine's own). */
  clear(): void {
    this.length = 0;
  }

  /** Appends the ticks of `from` whose underlying is in `keep`. */
  takeFrom(from: TickLog, keep: ReadonlySet<string>): void {
    for (let i = 0; i < from.length; i++) {
      const u = from.underlying[i] as string;
      if (keep.has(u)) this.push(u, from.tickTsMs[i] as number, from.busTsMs[i] as number);
    }
  }

  /** `before` first, then these. */
  prepend(before: TickLog): void {
    const n = this.length;
    const total = before.length + n;
    if (total > this.tickTsMs.length) this.grow(total);
    this.tickTsMs.copyWithin(before.length, 0, n);
    this.busTsMs.copyWithin(before.length, 0, n);
    this.tickTsMs.set(before.tickTsMs.subarray(0, before.length));
    this.busTsMs.set(before.busTsMs.subarray(0, before.length));
    this.underlying = before.underlying.slice(0, before.length).concat(this.underlying.slice(0, n));
    this.length = total;
  }

  private grow(capacity: number): void {
    const t = new Float64Array(capacity);
    const b = new Float64Array(capacity);
    t.set(this.tickTsMs.subarray(0, this.length));
    b.set(this.busTsMs.subarray(0, this.length));
    this.tickTsMs = t;
    this.busTsMs = b;
  }
}

const NO_TICKS = new TickLog();

export class EngineRunner {
  readonly latency: LatencyWindow;
  /**
   * Off while state is being rebuilt (a bootstrap, a replay of history from topics): the age of a
   * historical tick is not the pipeline's latency and would poison the live percentiles.
   */
  recordLatency = true;
  private readonly engine: RunnerEngine;
  private readonly bus: Bus;
  private readonly topics: { exposures: string; alerts: string; rejected: string };
  private readonly maxInterval: number;
  private readonly minInterval: number;
  /** The current coalescing interval (fixed unless minPublishIntervalMs is below the maximum). */
  private interval: number;
  private readonly now: () => number;
  private pending = new Map<string, PendingExposure>();
  /** Ticks whose exposures wait in `pending`; their latency is taken when that flush is acked. */
  private pendingTicks = new TickLog();
  /** The log a finished flush handed back, refilled as the next pendingTicks. */
  private spareTicks = new TickLog();
  /** The applied batch's ticks, refilled by every batch (collect takes them at once). */
  private readonly batchTicks = new TickLog();
  private lastFlushAt = Number.NEGATIVE_INFINITY;
  private flushTimer: NodeJS.Timeout | null = null;
  private decayTimer: NodeJS.Timeout | null = null;
  /** Every publish goes through this chain, so outputs leave in the order they were produced. */
  private chain: Promise<void> = Promise.resolve();
  /** Released by the next successful flush (handleUntilAcked's promises). */
  private flushWaiters: (() => void)[] = [];
  /** Batches taken by handleUntilAcked, applied at the next flush. */
  private buffered: BusRecord[][] = [];
  /** Events produced and not yet acknowledged, in order. */
  private queuedAlerts: Signal[] = [];
  private queuedRejected: RejectedMsg[] = [];
  private started = false;
  private stopped = false;
  private readonly counters: RunnerStats = {
    batches: 0,
    records: 0,
    spots: 0,
    conflated: 0,
    accepted: 0,
    duplicates: 0,
    rejected: 0,
    exposuresPublished: 0,
    alertsPublished: 0,
    rejectedPublished: 0,
    decayRuns: 0,
    internalErrors: 0,
  };

  constructor(private readonly opts: RunnerOptions) {
    this.engine = opts.engine;
    this.bus = opts.bus;
    this.topics = opts.outputTopics ?? {
      exposures: TOPICS.exposures,
      alerts: TOPICS.alerts,
      rejected: TOPICS.rejected,
    };
    this.maxInterval = opts.publishIntervalMs ?? 100;
    this.minInterval = Math.min(opts.minPublishIntervalMs ?? this.maxInterval, this.maxInterval);
    if (!(this.minInterval >= 0)) throw new RangeError('minPublishIntervalMs must be >= 0');
    this.interval = this.maxInterval;
    this.now = opts.now ?? Date.now;
    this.latency = new LatencyWindow(opts.latencyWindow);
    if (!(this.interval >= 0)) throw new RangeError('publishIntervalMs must be >= 0');
    const decay = opts.decayIntervalMs ?? 0;
    if (!(decay >= 0)) throw new RangeError('decayIntervalMs must be >= 0');
  }

  async start(): Promise<void> {
    if (this.started) throw new Error('EngineRunner already started');
    this.started = true;
    await this.bus.subscribe([...(this.opts.inputTopics ?? INPUT_TOPICS)], (batch) => this.handle(batch));
    const decay = this.opts.decayIntervalMs ?? 0;
    if (decay > 0) {
      this.decayTimer = setInterval(() => void this.decay(), decay);
      this.decayTimer.unref();
    }
  }

  stats(): RunnerStats {
    return { ...this.counters };
  }

  /** The batch handler the bus calls. Exposed for transports that deliver batches themselves. */
  async handle(batch: BusRecord[]): Promise<void> {
    this.settle();
    const { out, ticks } = this.applyBatch([batch]);
    this.collect(out, ticks);
    await this.release();
  }

  /** Events now (in order, through the chain); exposures now if due, else at the flush timer. */
  private async release(): Promise<void> {
    const work: Promise<void>[] = [];
    if (this.queuedAlerts.length || this.queuedRejected.length)
      work.push(this.enqueue(() => this.publishQueuedEvents()));
    if (this.pending.size > 0) {
      if (this.isDue()) work.push(this.enqueue(() => this.flush()));
      else this.armFlushTimer();
    }
    await Promise.all(work);
  }

  /**
   * For a transport that commits offsets (Kafka): the batch is kept and applied at the next flush,
   * together with every batch that arrived meanwhile, so that spots are conflated per underlying
   * over the publish interval rather than within one small fetch (the exposures leave at that
   * flush either way, so this adds no latency). Resolves at once; `outputsAcked` resolves when
   * everything the batch caused (events, then exposures) is acknowledged.
   */
  async handleUntilAcked(batch: BusRecord[]): Promise<{ outputsAcked: Promise<void> }> {
    if (batch.length) this.buffered.push(batch);
    const outputsAcked = new Promise<void>((resolve) => this.flushWaiters.push(resolve));
    if (this.isDue())
      this.enqueue(() => this.flush()).catch((err: unknown) => this.opts.onError?.(err, 'exposure flush'));
    else this.armFlushTimer();
    return { outputsAcked };
  }

  private isDue(): boolean {
    return this.stopped || this.now() - this.lastFlushAt >= this.interval;
  }

  /** Applies the batches kept by handleUntilAcked, as one. */
  private settle(): void {
    if (this.buffered.length === 0) return;
    const chunks = this.buffered;
    this.buffered = [];
    const { out, ticks } = this.applyBatch(chunks);
    this.collect(out, ticks);
  }

  /** Applies the records of `chunks`, in order, as one batch. */
  private applyBatch(chunks: readonly (readonly BusRecord[])[]): { out: Drained; ticks: TickLog } {
    const t0 = performance.now();
    const plan = planBatch(chunks);
    const ticks = this.batchTicks;
    ticks.clear();
    this.counters.batches++;
    this.counters.records += plan.size;
    this.counters.conflated += plan.conflated;
    // Ingest and drain without an await in between: the decay timer cannot interleave.
    const internal: RejectedMsg[] = [];
    const counted = (outcome: IngestOutcome, i: number, r: BusRecord) => {
      if (outcome === 'accepted') this.counters.accepted++;
      else if (outcome === 'duplicate') this.counters.duplicates++;
      else this.counters.rejected++;
      const u = plan.spotOf[i];
      if (outcome === 'accepted' && u !== undefined)
        ticks.push(u, plan.tsMs[i] as number, r.timestamp ?? Number.NaN);
    };
    const one = (i: number, r: BusRecord) => {
      let outcome: IngestOutcome;
      try {
        outcome = this.engine.ingest(r.value, originOf(r), plan.decoded(i, r.value));
      } catch (err) {
        // An engine fault must not stall the partition nor lose the record: dead-letter it.
        this.counters.internalErrors++;
        this.opts.onError?.(err, `ingest ${originOf(r)}`);
        internal.push({
          type: 'rejected',
          reason: `internal error while applying: ${err instanceof Error ? err.message : String(err)}`,
          source: originOf(r),
          raw: r.value,
          ts: new Date(this.now()).toISOString(),
        });
        outcome = 'rejected';
      }
      counted(outcome, i, r);
    };
    // Consecutive spots go to the engine as one run when it can take one (see ingestSpots).
    const runIdx: number[] = [];
    const runRec: BusRecord[] = [];
    const endRun = () => {
      if (runIdx.length === 0) return;
      const grouped = this.engine.ingestSpots;
      let outcomes: IngestOutcome[] | undefined;
      if (runIdx.length > 1 && grouped) {
        try {
          outcomes = grouped.call(
            this.engine,
            runIdx.map((i, k) => {
              const r = runRec[k] as BusRecord;
              return { raw: r.value, source: originOf(r), decoded: plan.decoded(i, r.value) };
            }),
          );
        } catch {
          // Which record failed is unknown: apply them one by one, so that only the faulty one is
          // dead-lettered (the ones already applied are the same spots again: no change).
        }
      }
      if (outcomes)
        for (let k = 0; k < runIdx.length; k++)
          counted(outcomes[k] as IngestOutcome, runIdx[k] as number, runRec[k] as BusRecord);
      else for (let k = 0; k < runIdx.length; k++) one(runIdx[k] as number, runRec[k] as BusRecord);
      runIdx.length = 0;
      runRec.length = 0;
    };
    let i = 0;
    for (const chunk of chunks)
      for (let k = 0; k < chunk.length; k++, i++) {
        const r = chunk[k] as BusRecord;
        const isSpot = plan.spotOf[i] !== undefined;
        if (isSpot) this.counters.spots++;
        if (plan.apply[i] === 0) {
          // a superseded spot: accepted, and its latency is its successor's publication
          counted('accepted', i, r);
          continue;
        }
        if (isSpot) {
          runIdx.push(i);
          runRec.push(r);
          continue;
        }
        endRun();
        one(i, r);
      }
    endRun();
    if (plan.conflated > 0) this.opts.observer?.input?.('spot', 'accepted', plan.conflated);
    const out = this.drainEngine();
    this.opts.metrics?.batchProcessed((performance.now() - t0) / 1000);
    if (internal.length) out.rejected = [...out.rejected, ...internal];
    return { out, ticks };
  }

  /** Publishes whatever exposures are waiting, now. */
  flushNow(): Promise<void> {
    return this.enqueue(() => this.flush());
  }

  /** Stops the decay clock and publishes what is pending. The bus is the caller's to close. */
  async stop(): Promise<void> {
    if (this.stopped) return;
    this.stopped = true;
    if (this.decayTimer) clearInterval(this.decayTimer);
    if (this.flushTimer) clearTimeout(this.flushTimer);
    this.flushTimer = null;
    await this.flushNow();
  }

  /**
   * Publishes the whole current snapshot (after a rebuild, so that a flush lost in a crash is
   * repaired before anything else is read).
   */
  publishSnapshot(): Promise<void> {
    const snap = this.engine.snapshot();
    for (const e of snap) this.pending.set(e.nodeKey, e);
    return this.flushNow();
  }

  private async decay(): Promise<void> {
    if (this.stopped) return;
    try {
      this.settle();
      this.engine.revalueAll();
      this.counters.decayRuns++;
      this.collect(this.drainEngine(), NO_TICKS);
      await this.release();
    } catch (err) {
      this.counters.internalErrors++;
      this.opts.onError?.(err, 'decay');
    }
  }

  private drainEngine(): Drained {
    const e = this.engine;
    if (e.drainChanged) return e.drainChanged();
    return e.drain();
  }

  /** Takes a drain's outputs: exposures into the pending map, events into the queue. */
  private collect(out: Drained, ticks: TickLog): void {
    // Re-insert so that Map order tracks the latest change and a flush is in change order.
    const pending = this.pending;
    const touched = ticks.length ? new Set<string>() : null;
    if (out.exposures)
      for (const e of out.exposures) {
        pending.delete(e.nodeKey);
        pending.set(e.nodeKey, e);
        if (touched && e.node.underlying) touched.add(e.node.underlying);
      }
    if (out.changed)
      for (const c of out.changed) {
        pending.delete(c.key);
        pending.set(c.key, c);
        if (touched && c.underlying !== undefined) touched.add(c.underlying);
      }
    // Only ticks that moved a node of their own underlying have a publication to wait for.
    if (touched) this.pendingTicks.takeFrom(ticks, touched);
    for (const a of out.alerts) this.queuedAlerts.push(a);
    for (const r of out.rejected) this.queuedRejected.push(r);
  }

  /** A failed flush: its acknowledgements are the retry's, one interval from now (or the next batch's flush). */
  private retryLater(waiters: (() => void)[]): void {
    this.flushWaiters = waiters.concat(this.flushWaiters);
    this.armFlushTimer();
  }

  private armFlushTimer(): void {
    if (this.flushTimer || this.stopped) return;
    const wait = Math.max(0, this.lastFlushAt + this.interval - this.now());
    this.flushTimer = setTimeout(() => {
      this.flushTimer = null;
      this.enqueue(() => this.flush()).catch((err) => this.opts.onError?.(err, 'exposure flush'));
    }, wait);
  }

  private enqueue(fn: () => Promise<void>): Promise<void> {
    const run = this.chain.then(fn);
    // The chain itself never rejects, so one failed publish does not poison the ones after it;
    // the caller still sees its own failure through `run`.
    this.chain = run.catch(() => undefined);
    return run;
  }

  /** Publishes the queued events in the order produced; on failure they stay queued, first. */
  private async publishQueuedEvents(): Promise<void> {
    const alerts = this.queuedAlerts;
    const rejected = this.queuedRejected;
    if (alerts.length === 0 && rejected.length === 0) return;
    this.queuedAlerts = [];
    this.queuedRejected = [];
    const work: Promise<void>[] = [];
    if (alerts.length) work.push(this.bus.publish(this.topics.alerts, alerts.map(signalRecord)));
    if (rejected.length)
      work.push(
        this.bus.publish(
          this.topics.rejected,
          rejected.map((r) => ({ key: null, value: JSON.stringify(r) })),
        ),
      );
    try {
      await Promise.all(work);
    } catch (err) {
      // Published again whole: a duplicate alert or dead letter is harmless, a lost one is not.
      this.queuedAlerts = alerts.concat(this.queuedAlerts);
      this.queuedRejected = rejected.concat(this.queuedRejected);
      throw err;
    }
    this.counters.alertsPublished += alerts.length;
    this.counters.rejectedPublished += rejected.length;
    this.opts.onPublished?.({ exposures: [], alerts, rejected });
  }

  private async flush(): Promise<void> {
    if (this.flushTimer) {
      clearTimeout(this.flushTimer);
      this.flushTimer = null;
    }
    const waiters = this.flushWaiters;
    this.flushWaiters = [];
    const startedAt = this.now();
    this.settle();
    // A flush with nothing to send does not count as one: the next change may leave at once.
    if (this.pending.size > 0 || this.queuedAlerts.length || this.queuedRejected.length)
      this.lastFlushAt = startedAt;
    try {
      await this.publishQueuedEvents();
    } catch (err) {
      this.retryLater(waiters);
      throw err;
    }
    if (this.pending.size === 0) {
      for (const w of waiters) w();
      return;
    }
    const entries = [...this.pending.values()];
    const ticks = this.pendingTicks;
    this.pending = new Map();
    this.pendingTicks = this.spareTicks;
    this.pendingTicks.clear();
    // A source is read now, at its latest value: the value every exposure it superseded would have
    // been replaced by anyway (latest wins). Message objects are only built for a listener.
    const wantObjects = this.opts.onPublished !== undefined;
    const records = new Array<OutRecord>(entries.length);
    const exposures: ExposureMsg[] = wantObjects ? new Array<ExposureMsg>(entries.length) : [];
    for (let k = 0; k < entries.length; k++) {
      const e = entries[k] as PendingExposure;
      if (isMsg(e)) {
        records[k] = { key: e.nodeKey, value: JSON.stringify(e) };
        if (wantObjects) exposures[k] = e;
      } else {
        records[k] = { key: e.key, value: e.json() };
        if (wantObjects) exposures[k] = e.exposure();
      }
    }
    try {
      await this.bus.publish(this.topics.exposures, records);
    } catch (err) {
      // Put them back unless a newer value arrived meanwhile: nothing is lost to a failed publish.
      for (const e of entries) {
        const key = isMsg(e) ? e.nodeKey : e.key;
        if (!this.pending.has(key)) this.pending.set(key, e);
      }
      this.pendingTicks.prepend(ticks);
      ticks.clear();
      this.spareTicks = ticks;
      this.retryLater(waiters);
      throw err;
    }
    const wall = this.now();
    if (this.minInterval < this.maxInterval)
      this.interval = Math.min(
        this.maxInterval,
        Math.max(this.minInterval, (wall - this.lastFlushAt) / PUBLISH_SHARE),
      );
    const metrics = this.opts.metrics;
    if (this.recordLatency)
      for (let i = 0; i < ticks.length; i++) {
        const tickTs = ticks.tickTsMs[i] as number;
        const busTs = ticks.busTsMs[i] as number;
        // A tick stamped by a clock ahead of ours would show a negative latency: count it as zero.
        this.latency.record(Math.max(0, wall - tickTs));
        metrics?.tickToPublish(tickTs, wall);
        if (!Number.isNaN(busTs)) metrics?.busToPublish(busTs, wall);
      }
    ticks.clear();
    this.spareTicks = ticks;
    this.counters.exposuresPublished += entries.length;
    this.opts.onPublished?.({ exposures, alerts: [], rejected: [] });
    for (const w of waiters) w();
  }
}

/** Contract: a dead letter names its origin as topic, partition and offset where known. */
export function originOf(r: BusRecord): string {
  if (r.partition === undefined) return r.topic;
  return r.offset === undefined
    ? `${r.topic} partition ${r.partition}`
    : `${r.topic} partition ${r.partition} offset ${r.offset}`;
}

/** Adaptive interval: the share of wall time a flush (build, serialise, acknowledged publish) may take. */
const PUBLISH_SHARE = 0.2;

function isMsg(e: PendingExposure): e is ExposureMsg {
  return (e as ExposureMsg).type === 'exposure';
}

function signalRecord(a: Signal): OutRecord {
  return { key: a.type === 'alert' ? a.limitId : a.underlying, value: JSON.stringify(a) };
}
