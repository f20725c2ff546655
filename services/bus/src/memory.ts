// The in-process transport: the embedded default and the benchmark run the same EngineRunner over
// it as over Kafka. Semantics chosen to be the strict subset of Kafka's that the runner relies on:
// per-partition order, one batch in flight per subscription (the next batch waits for the handler),
// and a publish that resolves only once every subscriber holds the records. Queues are bounded and
// a full queue makes publish wait (back-pressure): nothing is ever dropped between a publisher and a
// subscriber that exists.
import type { Bus, BusRecord, BatchHandler, OutRecord } from './bus.ts';

export interface MemoryBusOptions {
  /** Partitions per topic (a number for every topic, or per topic name); default 1. */
  partitions?: number | Record<string, number>;
  /** Records a subscription may hold before publishers wait; default 10 000. */
  queueCapacity?: number;
  /** Largest batch handed to a handler; default 5 000 (large, so a backlog is taken in one go). */
  maxBatch?: number;
  /** Transport timestamp source (epoch ms); default Date.now. */
  now?: () => number;
  /**
   * Called when a handler rejects. The subscription then stops where it is (the failed batch stays
   * at the head of its queue, like an uncommitted Kafka batch) and publishers to it will wait.
   * Without it the error is rethrown on a fresh stack so that it cannot pass unnoticed.
   */
  onHandlerError?: (err: unknown, batch: BusRecord[]) => void;
}

export interface MemoryBusStats {
  published: number;
  delivered: number;
  /** Records published to a topic that had no subscription at the time (a topic nobody reads). */
  unread: number;
  queued: number;
  waitingPublishes: number;
}

export class BusClosedError extends Error {
  constructor() {
    super('memory bus is closed');
    this.name = 'BusClosedError';
  }
}

/** FNV-1a over UTF-16 code units: stable, fast, and only needs to spread keys over partitions. */
function keyHash(key: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < key.length; i++) {
    h ^= key.charCodeAt(i);
    h = Math.imul(h, 0x01000193);
  }
  return h >>> 0;
}

/** Array-backed FIFO with a moving head: shift() on a large array is O(n), this is O(1) amortized. */
class Fifo<T> {
  private items: T[] = [];
  private head = 0;
  get length(): number {
    return this.items.length - this.head;
  }
  push(x: T): void {
    this.items.push(x);
  }
  peek(): T | undefined {
    return this.items[this.head];
  }
  take(n: number): T[] {
    const out = this.items.slice(this.head, this.head + n);
    this.head += out.length;
    if (this.head > 1024 && this.head * 2 > this.items.length) {
      this.items = this.items.slice(this.head);
      this.head = 0;
    }
    return out;
  }
  shift(): T | undefined {
    const x = this.items[this.head];
    if (x === undefined) return undefined;
    this.take(1);
    return x;
  }
  clear(): T[] {
    const rest = this.items.slice(this.head);
    this.items = [];
    this.head = 0;
    return rest;
  }
}

class Subscription {
  readonly queue = new Fifo<BusRecord>();
  /** The batch handed to the handler and not yet resolved: it still occupies queue capacity. */
  inFlight = 0;
  halted = false;
  running: Promise<void> | null = null;
  constructor(
    readonly topics: ReadonlySet<string>,
    readonly handler: BatchHandler,
  ) {}
}

interface PendingPublish {
  topic: string;
  records: OutRecord[];
  next: number;
  resolve: () => void;
  reject: (e: unknown) => void;
}

export class MemoryBus implements Bus {
  private readonly capacity: number;
  private readonly maxBatch: number;
  private readonly now: () => number;
  private readonly subs: Subscription[] = [];
  /** One FIFO of waiting publishes per topic keeps concurrent publishers' records in call order. */
  private readonly pending = new Map<string, Fifo<PendingPublish>>();
  private readonly offsets = new Map<string, number[]>();
  private readonly roundRobin = new Map<string, number>();
  private closed = false;
  private idleWaiters: (() => void)[] = [];
  private counters = { published: 0, delivered: 0, unread: 0 };

  constructor(private readonly opts: MemoryBusOptions = {}) {
    this.capacity = opts.queueCapacity ?? 10_000;
    this.maxBatch = opts.maxBatch ?? 5_000;
    this.now = opts.now ?? Date.now;
    if (!(this.capacity >= 1)) throw new RangeError('MemoryBus queueCapacity must be >= 1');
    if (!(this.maxBatch >= 1)) throw new RangeError('MemoryBus maxBatch must be >= 1');
  }

  partitionsOf(topic: string): number {
    const p = this.opts.partitions;
    const n = typeof p === 'number' ? p : (p?.[topic] ?? 1);
    if (!Number.isInteger(n) || n < 1)
      throw new RangeError(`MemoryBus partitions for '${topic}' must be an integer >= 1`);
    return n;
  }

  publish(topic: string, records: OutRecord[]): Promise<void> {
    if (this.closed) return Promise.reject(new BusClosedError());
    if (records.length === 0) return Promise.resolve();
    return new Promise<void>((resolve, reject) => {
      let q = this.pending.get(topic);
      if (!q) {
        q = new Fifo();
        this.pending.set(topic, q);
      }
      q.push({ topic, records, next: 0, resolve, reject });
      this.pump(topic);
    });
  }

  async subscribe(topics: string[], handler: BatchHandler): Promise<void> {
    if (this.closed) throw new BusClosedError();
    if (topics.length === 0) throw new RangeError('MemoryBus.subscribe needs at least one topic');
    this.subs.push(new Subscription(new Set(topics), handler));
  }

  /** Resolves when every queue is empty, no handler is running and no publish is waiting. */
  idle(): Promise<void> {
    if (this.isIdle()) return Promise.resolve();
    return new Promise((resolve) => this.idleWaiters.push(resolve));
  }

  stats(): MemoryBusStats {
    let queued = 0;
    for (const s of this.subs) queued += s.queue.length + s.inFlight;
    let waitingPublishes = 0;
    for (const q of this.pending.values()) waitingPublishes += q.length;
    return { ...this.counters, queued, waitingPublishes };
  }

  /**
   * Stops delivery after the batches in flight and fails publishes still waiting for room (their
   * callers learn that those records were not delivered). Records already queued are not handed
   * to handlers any more.
   */
  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    for (const q of this.pending.values()) for (const p of q.clear()) p.reject(new BusClosedError());
    await Promise.all(this.subs.map((s) => s.running ?? Promise.resolve()));
    for (const s of this.subs) s.queue.clear();
    this.notifyIdle();
  }

  private isIdle(): boolean {
    for (const s of this.subs) if (s.queue.length > 0 || s.inFlight > 0) return false;
    for (const q of this.pending.values()) if (q.length > 0) return false;
    return true;
  }

  private notifyIdle(): void {
    if (this.idleWaiters.length === 0 || !(this.closed || this.isIdle())) return;
    const waiters = this.idleWaiters;
    this.idleWaiters = [];
    for (const w of waiters) w();
  }

  /** Moves as many waiting records of a topic as every subscriber of it has room for. */
  private pump(topic: string): void {
    const q = this.pending.get(topic);
    if (!q) return;
    const readers = this.subs.filter((s) => s.topics.has(topic));
    for (let p = q.peek(); p; p = q.peek()) {
      let room = p.records.length - p.next;
      for (const s of readers) room = Math.min(room, this.capacity - s.queue.length - s.inFlight);
      if (room <= 0) return; // a reader's 'free' wakes us
      const ts = this.now();
      for (let i = 0; i < room; i++) {
        const out = p.records[p.next + i]!;
        const rec = this.stamp(topic, out, ts);
        for (const s of readers) s.queue.push(rec);
      }
      p.next += room;
      this.counters.published += room;
      if (readers.length === 0) this.counters.unread += room;
      for (const s of readers) this.schedule(s);
      if (p.next === p.records.length) {
        q.shift();
        p.resolve();
      }
    }
    this.notifyIdle();
  }

  private stamp(topic: string, out: OutRecord, ts: number): BusRecord {
    const n = this.partitionsOf(topic);
    let partition = 0;
    if (n > 1) {
      if (out.key === null) {
        // Kafka spreads keyless records too; round robin keeps the in-process picture alike.
        partition = this.roundRobin.get(topic) ?? 0;
        this.roundRobin.set(topic, (partition + 1) % n);
      } else partition = keyHash(out.key) % n;
    }
    let offs = this.offsets.get(topic);
    if (!offs) {
      offs = new Array<number>(n).fill(0);
      this.offsets.set(topic, offs);
    }
    const offset = offs[partition] ?? 0;
    offs[partition] = offset + 1;
    return { topic, key: out.key, value: out.value, partition, offset: String(offset), timestamp: ts };
  }

  private schedule(s: Subscription): void {
    if (s.running || s.halted || this.closed) return;
    // setImmediate, not a microtask: delivery is asynchronous, so a publisher's own code after
    // `await publish` and timers get their turn between batches.
    s.running = new Promise<void>((done) => setImmediate(() => void this.deliver(s).finally(done)));
  }

  private async deliver(s: Subscription): Promise<void> {
    try {
      while (!this.closed && !s.halted && s.queue.length > 0) {
        const batch = s.queue.take(this.maxBatch);
        s.inFlight = batch.length;
        try {
          await s.handler(batch);
        } catch (err) {
          s.halted = true;
          // Put the batch back at the head conceptually: it stays counted as in flight so that
          // capacity accounting and idle() tell the truth about an undelivered batch.
          if (this.opts.onHandlerError) this.opts.onHandlerError(err, batch);
          else
            setImmediate(() => {
              throw err;
            });
          return;
        }
        s.inFlight = 0;
        this.counters.delivered += batch.length;
        for (const t of s.topics) this.pump(t);
      }
    } finally {
      s.running = null;
      this.notifyIdle();
    }
  }
}
