// The Kafka transport behind the Bus seam, over kafkajs.
//
// Delivery is at-least-once by construction: a batch's offsets are resolved and committed only
// after the handler has resolved, and the runner's handler resolves only once every output that
// depends on the batch has been acknowledged by the broker. A process that dies in between leaves
// the batch uncommitted, so whoever owns the partition next reads it again.
// First, before kafkajs loads (kafkajs-fast-paths.ts says why).
import { kafkajsFastPaths } from './kafkajs-fast-paths.ts';
import kafkajs from 'kafkajs';
import type {
  Admin,
  Consumer,
  EachBatchPayload,
  Kafka as KafkaClient,
  KafkaMessage,
  LogEntry,
  Producer,
  SASLOptions,
} from 'kafkajs';
import type { Bus, BusRecord, OutRecord } from './bus.ts';
import { describeKafkaConfig, KafkaConfigError, resolveConnection } from './kafka-config.ts';
import { javaPartition, memoizedJavaPartitioner } from './kafka-partition.ts';
import { PlainMessage } from './kafka-fetch-decoder.ts';
import type { KafkaConnection, KafkaSasl } from './kafka-config.ts';

const { Kafka, Partitioners, logLevel, CompressionTypes } = kafkajs;

/** The pino-shaped subset the transport logs through (pino's own logger fits). */
export interface KafkaBusLogger {
  debug(obj: object, msg: string): void;
  info(obj: object, msg: string): void;
  warn(obj: object, msg: string): void;
  error(obj: object, msg: string): void;
}

export interface PartitionAssignment {
  /** Logical topic name, prefix stripped. */
  topic: string;
  partitions: number[];
}

export type RebalanceEvent =
  /** The group is rebalancing: partitions are about to be revoked; nothing is owned until assigned. */
  | { kind: 'rebalancing'; groupId: string }
  /** This member now owns exactly these partitions (possibly none). */
  | { kind: 'assigned'; groupId: string; assignment: PartitionAssignment[] };

export interface KafkaBusOptions {
  /** `host:port,...` or a list; default KAFKA_BROKERS. */
  brokers?: string | string[];
  /** Default KAFKA_CLIENT_ID, then 'keelson'. */
  clientId?: string;
  /** Consumer group of subscribe(); default KAFKA_GROUP_ID, then 'keelson-engine'. */
  groupId?: string;
  /** Physical topic = prefix + logical name; default KAFKA_TOPIC_PREFIX, then 'keelson.'. */
  topicPrefix?: string;
  /** TLS; default from KAFKA_SSL* (see kafka-config.ts). */
  ssl?: KafkaConnection['ssl'];
  /** SASL; default from KAFKA_SASL_*. */
  sasl?: KafkaSasl;
  /** Environment to read defaults from (tests pass their own); default process.env. */
  env?: NodeJS.ProcessEnv;
  /** Where a group with no committed offset starts; default true (the book is rebuilt from the start). */
  fromBeginning?: boolean;
  sessionTimeoutMs?: number;
  heartbeatIntervalMs?: number;
  /** Longest a fetch waits for data when there is none: bounds idle latency. Default 50 ms. */
  maxWaitTimeMs?: number;
  maxBytesPerPartition?: number;
  /** Partitions whose batches are handled concurrently; default 1 (one batch at a time, in order). */
  partitionsConsumedConcurrently?: number;
  /** In-flight produce requests per connection, 1..5 (the idempotent producer's bound); default 1. */
  maxInFlightRequests?: number;
  compression?: 'none' | 'gzip';
  connectionTimeoutMs?: number;
  requestTimeoutMs?: number;
  logger?: KafkaBusLogger;
  onRebalance?: (event: RebalanceEvent) => void;
  onConnectionChange?: (connected: boolean) => void;
}

export interface SubscribeOptions {
  /** Another group than the bus's default (e.g. a per-instance group that reads a topic whole). */
  groupId?: string;
  fromBeginning?: boolean;
  /**
   * Commit each batch's offsets after its handler resolves (default true). false: a reader that
   * always starts over (a per-instance table of a compacted topic) and leaves no trace in the group.
   */
  commit?: boolean;
  /**
   * Rebuild on every assignment: each assigned partition is read again from its earliest offset.
   * Records below the boundary (the committed offset; with commit false, the end of the partition
   * at assignment) arrive with `restoring: true`: they were handled before and their outputs are
   * on the bus, so the handler rebuilds state from them and publishes nothing. A partition that
   * reaches its boundary waits (paused) until every assigned partition has, then `beforeLive` is
   * awaited, `onPhase('live')` is called, and all continue together: no output is ever computed
   * from a half-rebuilt state.
   */
  rebuild?: boolean;
  /** Called with 'restoring' before the first batch of an assignment, and 'live' as above. */
  onPhase?: (e: PhaseEvent) => void;
  beforeLive?: () => Promise<void>;
}

export interface PhaseEvent {
  phase: 'restoring' | 'live';
  groupId: string;
  generation: number;
  assignment: PartitionAssignment[];
}

/** What a Kafka batch handler learns beside the records. */
export interface BatchContext {
  groupId: string;
  /** Increments with every assignment this member receives. */
  generation: number;
  /** See SubscribeOptions.rebuild. */
  restoring: boolean;
}

/**
 * What a handler may return when some outputs of its batch are still on their way (coalesced
 * exposures waiting for the next flush): the bus moves on to the next batch at once and commits
 * this batch's offset only after `outputsAcked` resolves, in batch order per partition, and only
 * if the partition is still this member's (same generation). A handler that returns nothing has
 * its batch committed right after it resolves.
 */
export interface HandledBatch {
  outputsAcked: Promise<void>;
}

export type KafkaBatchHandler = (batch: BusRecord[], ctx: BatchContext) => Promise<void | HandledBatch>;

interface PartitionProgress {
  /** First offset that is not restoring. */
  boundary: bigint;
  restored: boolean;
  /** Paused by the rebuild (not by the user) while others restore. */
  heldBack: boolean;
}

type MemberState = 'connecting' | 'rebalancing' | 'joined' | 'crashed' | 'stopped';

interface Member {
  groupId: string;
  consumer: Consumer;
  topics: string[];
  state: MemberState;
  assignment: PartitionAssignment[];
  lastFetchAt: number;
  lastError?: string;
  opts: SubscribeOptions;
  generation: number;
  /** Resolves when the current assignment's offsets are known and seeks are placed. */
  prep: Promise<void> | undefined;
  progress: Map<string, PartitionProgress>;
  live: boolean;
  /** topic:partition -> next offset to handle (after the last handled batch), for the lag. */
  positions: Map<string, bigint>;
  /** topic:partition -> the last deferred commit (they run in batch order). */
  commits: Map<string, Promise<void>>;
  handler: KafkaBatchHandler;
  /** A consumer that kafkajs will not restart is being replaced (see replaceCrashed). */
  replacing: boolean;
}

export interface KafkaBusStatus {
  connected: boolean;
  producer: { connected: boolean; lastError?: string };
  consumers: {
    groupId: string;
    topics: string[];
    state: MemberState;
    assignment: PartitionAssignment[];
    lastError?: string;
  }[];
}

const DEFAULTS = {
  clientId: 'keelson',
  groupId: 'keelson-engine',
  topicPrefix: 'keelson.',
  sessionTimeoutMs: 10_000,
  heartbeatIntervalMs: 1_000,
  maxWaitTimeMs: 50,
  maxBytesPerPartition: 4 * 1024 * 1024,
};

function positiveInt(
  name: string,
  v: number | undefined,
  fallback: number,
  min = 1,
  max = Number.MAX_SAFE_INTEGER,
): number {
  if (v === undefined) return fallback;
  if (!Number.isInteger(v) || v < min || v > max)
    throw new KafkaConfigError(`${name} must be an integer in ${min}..${max}, got ${v}`);
  return v;
}

function toLogLevel(level: number): 'debug' | 'info' | 'warn' | 'error' {
  if (level === logLevel.ERROR) return 'error';
  if (level === logLevel.WARN) return 'warn';
  if (level === logLevel.INFO) return 'info';
  return 'debug';
}

/**
 * Bytes of key and value per partition in one produce request. kafkajs puts all of a request's
 * records for one partition in one record batch, and the broker refuses a batch over
 * message.max.bytes (1 MiB by default, Kafka broker configuration docs): a simulator bootstrap of
 * thousands of trades exceeded it.
 */
export const MAX_REQUEST_BYTES = 512 * 1024;

/**
 * Records cut into consecutive runs in which no partition's batch exceeds maxBytes (a larger
 * single record alone). `partitionOf` gives a record's partition, or -1 when it is not known (a
 * record without a key: kafkajs spreads those); without it, or at -1, the record counts against
 * every partition. One request per flush matters: the runs are sent one after the other, each
 * waiting for the broker.
 */
export function requestSized<R extends OutRecord>(
  records: R[],
  maxBytes = MAX_REQUEST_BYTES,
  partitionOf?: (r: R) => number,
): R[][] {
  const out: R[][] = [];
  let run: R[] = [];
  const perPartition = new Map<number, number>();
  let fullest = 0; // the largest per-partition total of the run
  let everywhere = 0; // bytes that count against every partition
  for (const r of records) {
    // UTF-16 length x 3 bounds the UTF-8 length without encoding; plus kafkajs's per-record overhead.
    const size = (r.value.length + (r.key?.length ?? 0)) * 3 + 64;
    const p = partitionOf ? partitionOf(r) : -1;
    const before = p < 0 ? fullest : (perPartition.get(p) ?? 0);
    if (run.length && before + everywhere + size > maxBytes) {
      out.push(run);
      run = [];
      perPartition.clear();
      fullest = 0;
      everywhere = 0;
    }
    run.push(r);
    if (p < 0) everywhere += size;
    else {
      const now = (perPartition.get(p) ?? 0) + size;
      perPartition.set(p, now);
      if (now > fullest) fullest = now;
    }
  }
  if (run.length) out.push(run);
  return out;
}

export class KafkaBus implements Bus {
  readonly topicPrefix: string;
  readonly groupId: string;
  readonly connection: KafkaConnection;
  private readonly kafka: KafkaClient;
  private readonly opts: KafkaBusOptions;
  private producer: Producer | undefined;
  private producerReady: Promise<Producer> | undefined;
  private producerConnected = false;
  private producerError: string | undefined;
  private readonly members: Member[] = [];
  private lastConnected = false;
  private closed = false;
  /** Set once close() has let the deferred commits land: later ones are not attempted. */
  private leaving = false;
  private readonly fetchStaleAfterMs: number;
  /** Staleness is a matter of time, not of an event: re-evaluated every second while consuming. */
  private staleTimer: ReturnType<typeof setInterval> | undefined;

  constructor(opts: KafkaBusOptions = {}) {
    const env = opts.env ?? process.env;
    this.opts = opts;
    this.connection = resolveConnection(
      { brokers: opts.brokers, clientId: opts.clientId, ssl: opts.ssl, sasl: opts.sasl },
      env,
    );
    this.topicPrefix = opts.topicPrefix ?? env.KAFKA_TOPIC_PREFIX ?? DEFAULTS.topicPrefix;
    if (!/^[A-Za-z0-9._-]*$/.test(this.topicPrefix)) {
      throw new KafkaConfigError(
        `topicPrefix may hold only letters, digits, '.', '_' and '-', got ${JSON.stringify(this.topicPrefix)}`,
      );
    }
    this.groupId = opts.groupId ?? env.KAFKA_GROUP_ID ?? DEFAULTS.groupId;
    positiveInt('maxInFlightRequests', opts.maxInFlightRequests, 1, 1, 5);
    positiveInt('partitionsConsumedConcurrently', opts.partitionsConsumedConcurrently, 1, 1, 1024);
    const heartbeat = positiveInt(
      'heartbeatIntervalMs',
      opts.heartbeatIntervalMs,
      DEFAULTS.heartbeatIntervalMs,
    );
    const session = positiveInt('sessionTimeoutMs', opts.sessionTimeoutMs, DEFAULTS.sessionTimeoutMs);
    if (heartbeat >= session)
      throw new KafkaConfigError('heartbeatIntervalMs must be below sessionTimeoutMs');
    const maxWait = positiveInt('maxWaitTimeMs', opts.maxWaitTimeMs, DEFAULTS.maxWaitTimeMs, 0, 60_000);
    // A member that fetched nothing for this long has lost the broker, even before kafkajs says so.
    this.fetchStaleAfterMs = Math.max(5_000, maxWait * 4, session);

    const logger = opts.logger;
    this.kafka = new Kafka({
      clientId: this.connection.clientId,
      brokers: this.connection.brokers,
      ssl: this.connection.ssl,
      ...(this.connection.sasl ? { sasl: this.connection.sasl as SASLOptions } : {}),
      connectionTimeout: opts.connectionTimeoutMs ?? 3_000,
      requestTimeout: opts.requestTimeoutMs ?? 30_000,
      logLevel: logger ? logLevel.INFO : logLevel.NOTHING,
      logCreator:
        () =>
        ({ level, log }: LogEntry) => {
          if (!logger) return;
          // kafkajs log entries carry broker addresses, group ids and error text, never credentials.
          const { message, timestamp: _t, logger: _l, ...rest } = log;
          logger[toLogLevel(level)]({ component: 'kafkajs', ...rest }, message);
        },
    });
    logger?.info(
      {
        kafka: describeKafkaConfig(this.connection),
        topicPrefix: this.topicPrefix,
        groupId: this.groupId,
        kafkajsFastPaths,
      },
      'kafka bus configured',
    );
  }

  /** The physical topic of a logical name. */
  physical(topic: string): string {
    return this.topicPrefix + topic;
  }

  /** The logical name of a physical topic (the prefix stripped). */
  logical(topic: string): string {
    return topic.startsWith(this.topicPrefix) ? topic.slice(this.topicPrefix.length) : topic;
  }

  /** An admin client on the same connection settings; the caller connects and disconnects it. */
  admin(): Admin {
    return this.kafka.admin();
  }

  async publish(topic: string, records: OutRecord[]): Promise<void> {
    if (records.length === 0) return;
    const n = this.knownPartitions(topic);
    await this.sendInOrder(
      topic,
      records.map((r) => ({ key: r.key, value: r.value })),
      n > 0 ? (r) => (r.key === null ? -1 : javaPartition(r.key, n)) : undefined,
      this.opts.compression === 'gzip' ? CompressionTypes.GZIP : CompressionTypes.None,
    );
  }

  /**
   * In order, one request at a time (the idempotent producer keeps the order within a partition),
   * each request as large as the brokers' batch limit allows; a failure marks the producer
   * unhealthy until a publish succeeds.
   */
  private async sendInOrder<M extends OutRecord>(
    topic: string,
    messages: M[],
    partitionOf: ((m: M) => number) | undefined,
    compression?: number,
  ): Promise<void> {
    const producer = await this.connectProducer();
    try {
      for (const part of requestSized(messages, MAX_REQUEST_BYTES, partitionOf)) {
        await producer.send({
          topic: this.physical(topic),
          acks: -1,
          ...(compression !== undefined ? { compression } : {}),
          messages: part,
        });
      }
      if (this.producerError !== undefined) {
        this.producerError = undefined;
        this.updateConnected();
      }
    } catch (e) {
      this.producerError = (e as Error).message;
      this.updateConnected();
      throw e;
    }
  }

  /**
   * Starts a consumer of `topics` (logical names) in the bus's group (or opts.groupId) and resolves
   * once it is running. One batch is one partition's fetched records, in offset order.
   */
  async subscribe(topics: string[], handler: KafkaBatchHandler, opts: SubscribeOptions = {}): Promise<void> {
    if (this.closed) throw new Error('kafka bus is closed');
    if (topics.length === 0) throw new KafkaConfigError('subscribe needs at least one topic');
    const groupId = opts.groupId ?? this.groupId;
    if (this.members.some((m) => m.groupId === groupId && m.state !== 'stopped')) {
      throw new KafkaConfigError(`this bus already has a consumer in group ${groupId}; pass another groupId`);
    }
    const member: Member = {
      groupId,
      consumer: this.newConsumer(groupId),
      topics: [...topics],
      state: 'connecting',
      assignment: [],
      lastFetchAt: 0,
      opts,
      generation: 0,
      prep: undefined,
      progress: new Map(),
      live: false,
      positions: new Map(),
      commits: new Map(),
      handler,
      replacing: false,
    };
    this.members.push(member);
    this.watch(member);
    this.staleTimer ??= setInterval(() => this.updateConnected(), 1_000);
    this.staleTimer.unref();
    await this.runMember(member);
  }

  private newConsumer(groupId: string): Consumer {
    return this.kafka.consumer({
      groupId,
      sessionTimeout: positiveInt('sessionTimeoutMs', this.opts.sessionTimeoutMs, DEFAULTS.sessionTimeoutMs),
      heartbeatInterval: positiveInt(
        'heartbeatIntervalMs',
        this.opts.heartbeatIntervalMs,
        DEFAULTS.heartbeatIntervalMs,
      ),
      maxWaitTimeInMs: this.opts.maxWaitTimeMs ?? DEFAULTS.maxWaitTimeMs,
      maxBytesPerPartition: this.opts.maxBytesPerPartition ?? DEFAULTS.maxBytesPerPartition,
      allowAutoTopicCreation: false,
      retry: {
        // Asked only for errors kafkajs deems retriable; the others are replaceCrashed's.
        restartOnFailure: async (err: Error) => {
          this.opts.logger?.warn({ groupId, err: err.message }, 'kafka consumer failed; restarting it');
          return !this.closed;
        },
      },
    });
  }

  private async runMember(member: Member): Promise<void> {
    const { consumer, opts } = member;
    await consumer.connect();
    await consumer.subscribe({
      topics: member.topics.map((t) => this.physical(t)),
      fromBeginning: opts.fromBeginning ?? this.opts.fromBeginning ?? true,
    });
    await consumer.run({
      // Commits are explicit, per batch, after the handler (kafkajs's auto-commit would also commit
      // on seek, which the rebuild uses to go back to the start).
      autoCommit: false,
      eachBatchAutoResolve: false,
      partitionsConsumedConcurrently: this.opts.partitionsConsumedConcurrently ?? 1,
      eachBatch: (payload) => this.handleBatch(member, payload, member.handler),
    });
  }

  /**
   * kafkajs gives up for good on an error it deems non-retriable, such as finding no group
   * coordinator while a broker goes down, and never asks restartOnFailure: the member would stay
   * dead. A stream processor has to come back, so the member gets a new consumer in the same group
   * (after a pause, and again until one runs); its uncommitted batches are fetched again.
   */
  private replaceCrashed(member: Member, pauseMs = 2_000): void {
    if (this.closed || member.replacing) return;
    member.replacing = true;
    member.state = 'connecting';
    const old = member.consumer;
    const timer = setTimeout(() => {
      void (async () => {
        await old.disconnect().catch(() => undefined);
        if (this.closed) return;
        this.forgetAssignment(member); // a batch of the old consumer still in a handler is not committed
        member.prep = undefined;
        member.consumer = this.newConsumer(member.groupId);
        this.watch(member);
        member.replacing = false;
        this.opts.logger?.warn({ groupId: member.groupId }, 'kafka consumer replaced after a crash');
        try {
          await this.runMember(member);
        } catch (err) {
          this.opts.logger?.warn(
            { groupId: member.groupId, err: (err as Error).message },
            'replacement kafka consumer did not start; trying again',
          );
          this.replaceCrashed(member, Math.min(pauseMs * 2, 10_000));
        }
      })();
    }, pauseMs);
    timer.unref();
  }

  /** The partitions are no longer this member's: what it still handles from them is not committed. */
  private forgetAssignment(member: Member): void {
    member.assignment = [];
    member.generation++;
    member.live = false;
  }

  private async handleBatch(member: Member, p: EachBatchPayload, handler: KafkaBatchHandler): Promise<void> {
    if (member.prep) await member.prep;
    const { batch } = p;
    const generation = member.generation;
    const last = batch.messages[batch.messages.length - 1];
    if (!last || !p.isRunning() || p.isStale()) return;
    const topic = this.logical(batch.topic);
    const records = batch.messages.map((m) => this.toRecord(topic, batch.partition, m));
    const commit = member.opts.commit ?? true;
    const progress = member.opts.rebuild ? member.progress.get(`${topic}:${batch.partition}`) : undefined;

    if (progress && !progress.restored) {
      const restoring = records.filter((r) => BigInt(r.offset!) < progress.boundary);
      if (restoring.length > 0) {
        await this.withHeartbeat(p, () =>
          handler(restoring, { groupId: member.groupId, generation, restoring: true }),
        );
        if (member.generation !== generation) return;
        p.resolveOffset(restoring[restoring.length - 1]!.offset!);
        member.positions.set(
          `${topic}:${batch.partition}`,
          BigInt(restoring[restoring.length - 1]!.offset!) + 1n,
        );
      }
      if (restoring.length === records.length && BigInt(last.offset) + 1n < progress.boundary) return;
      // At the boundary: hold this partition until all are there (its unresolved records are
      // fetched again on resume).
      progress.restored = true;
      progress.heldBack = true;
      member.consumer.pause([{ topic: batch.topic, partitions: [batch.partition] }]);
      await this.maybeGoLive(member, generation);
      return;
    }
    if (member.opts.rebuild && !member.live) return; // a held-back partition's batch in flight

    const handled = await this.withHeartbeat(p, () =>
      handler(records, { groupId: member.groupId, generation, restoring: false }),
    );
    // A batch handled across a rebalance is not ours to commit: its new owner reads it again.
    if (member.generation !== generation) return;
    p.resolveOffset(last.offset);
    member.positions.set(`${topic}:${batch.partition}`, BigInt(last.offset) + 1n);
    if (!commit) return;
    const next = (BigInt(last.offset) + 1n).toString();
    if (handled) {
      this.commitWhenAcked(member, generation, batch.topic, batch.partition, next, handled.outputsAcked);
      return;
    }
    await p.commitOffsetsIfNecessary({
      topics: [{ topic: batch.topic, partitions: [{ partition: batch.partition, offset: next }] }],
    });
  }

  /**
   * A deferred commit: after the batch's outputs and every earlier deferred commit of the
   * partition. Failures are not fatal: a later batch's commit covers this one, and a partition
   * that moved is read again by its new owner from the last commit that did land.
   */
  private commitWhenAcked(
    member: Member,
    generation: number,
    topic: string,
    partition: number,
    offset: string,
    acked: Promise<void>,
  ): void {
    const key = `${topic}:${partition}`;
    const prev = member.commits.get(key) ?? Promise.resolve();
    const done = prev
      .then(() => acked)
      .then(async () => {
        if (member.generation !== generation || member.state === 'stopped' || this.leaving) return;
        await member.consumer.commitOffsets([{ topic, partition, offset }]);
      })
      .catch((err: unknown) =>
        this.opts.logger?.debug(
          { groupId: member.groupId, topic, partition, offset, err: (err as Error).message },
          'deferred offset commit not made',
        ),
      );
    member.commits.set(key, done);
    void done.then(() => {
      if (member.commits.get(key) === done) member.commits.delete(key);
    });
  }

  /** A slow handler (a publish waiting for a broker that came back) must not cost the partition. */
  private async withHeartbeat<T>(p: EachBatchPayload, work: () => Promise<T>): Promise<T> {
    // kafkajs throttles heartbeats to its interval; calling more often is harmless.
    const beat = setInterval(
      () => void p.heartbeat().catch(() => undefined),
      Math.max(100, Math.floor((this.opts.heartbeatIntervalMs ?? DEFAULTS.heartbeatIntervalMs) / 2)),
    );
    try {
      return await work();
    } finally {
      clearInterval(beat);
    }
  }

  private async maybeGoLive(member: Member, generation: number): Promise<void> {
    if (member.live || member.generation !== generation) return;
    for (const pr of member.progress.values()) if (!pr.restored) return;
    member.live = true; // before the await: a second caller must not go live twice
    try {
      await member.opts.beforeLive?.();
    } catch (e) {
      this.opts.logger?.error({ groupId: member.groupId, err: (e as Error).message }, 'before going live');
      throw e;
    }
    if (member.generation !== generation) return;
    const held: { topic: string; partitions: number[] }[] = [];
    for (const [key, pr] of member.progress) {
      if (!pr.heldBack) continue;
      pr.heldBack = false;
      const cut = key.lastIndexOf(':');
      held.push({ topic: this.physical(key.slice(0, cut)), partitions: [Number(key.slice(cut + 1))] });
    }
    member.opts.onPhase?.({
      phase: 'live',
      groupId: member.groupId,
      generation,
      assignment: member.assignment,
    });
    if (held.length) member.consumer.resume(held);
  }

  /**
   * Offsets of a new assignment: where each partition starts (its earliest offset, by seek) and
   * where restoring ends. Runs before any batch of the assignment is handled.
   */
  private async prepareRebuild(member: Member, generation: number): Promise<void> {
    const admin = await this.sharedAdmin();
    const commit = member.opts.commit ?? true;
    const topics = member.assignment.map((a) => this.physical(a.topic));
    const committed = new Map<string, bigint>();
    if (commit && topics.length) {
      for (const t of await admin.fetchOffsets({ groupId: member.groupId, topics })) {
        for (const pp of t.partitions) committed.set(`${t.topic}:${pp.partition}`, BigInt(pp.offset));
      }
    }
    const progress = new Map<string, PartitionProgress>();
    const seeks: { topic: string; partition: number; offset: string }[] = [];
    for (const a of member.assignment) {
      const physical = this.physical(a.topic);
      const offsets = await admin.fetchTopicOffsets(physical);
      for (const partition of a.partitions) {
        const o = offsets.find((x) => x.partition === partition);
        const low = BigInt(o?.low ?? '0');
        const high = BigInt(o?.high ?? '0');
        const done = committed.get(`${physical}:${partition}`) ?? -1n;
        let boundary = commit ? (done >= 0n ? done : low) : high;
        if (boundary < low) boundary = low; // retention removed what was committed
        if (boundary > high) boundary = high;
        const restored = boundary <= low;
        progress.set(`${a.topic}:${partition}`, { boundary, restored, heldBack: false });
        seeks.push({ topic: physical, partition, offset: low.toString() });
      }
    }
    if (member.generation !== generation) return;
    member.progress = progress;
    for (const sk of seeks) member.consumer.seek(sk);
    // Partitions with nothing to restore wait for the others, like those that reach their boundary.
    const hold: { topic: string; partitions: number[] }[] = [];
    const anyRestoring = [...progress.values()].some((pr) => !pr.restored);
    if (anyRestoring) {
      for (const [key, pr] of progress) {
        if (!pr.restored) continue;
        pr.heldBack = true;
        const cut = key.lastIndexOf(':');
        hold.push({ topic: this.physical(key.slice(0, cut)), partitions: [Number(key.slice(cut + 1))] });
      }
      if (hold.length) member.consumer.pause(hold);
    }
  }

  /**
   * Consumer lag per owned partition and group: the high watermark minus the position, which is
   * the offset after the last batch this process handled there, else the group's committed offset,
   * else the partition's earliest offset (nothing read yet). During a rebuild the position starts
   * again at the earliest offset, so the lag also says how much rebuilding is left.
   */
  async consumerLag(): Promise<{ groupId: string; topic: string; partition: number; lag: number }[]> {
    const admin = await this.sharedAdmin();
    const ends = new Map<string, { partition: number; low: string; high: string }[]>();
    const out: { groupId: string; topic: string; partition: number; lag: number }[] = [];
    for (const m of this.members) {
      if (m.state === 'stopped' || m.assignment.length === 0) continue;
      const assignment = m.assignment;
      const committed = new Map<string, bigint>();
      if (m.opts.commit ?? true) {
        const topics = assignment.map((a) => this.physical(a.topic));
        for (const t of await admin.fetchOffsets({ groupId: m.groupId, topics }))
          for (const pp of t.partitions)
            committed.set(`${this.logical(t.topic)}:${pp.partition}`, BigInt(pp.offset));
      }
      for (const a of assignment) {
        let offs = ends.get(a.topic);
        if (!offs) {
          offs = await admin.fetchTopicOffsets(this.physical(a.topic));
          ends.set(a.topic, offs);
        }
        for (const partition of a.partitions) {
          const o = offs.find((x) => x.partition === partition);
          if (!o) continue;
          const key = `${a.topic}:${partition}`;
          const done = committed.get(key);
          const pos = m.positions.get(key) ?? (done !== undefined && done >= 0n ? done : BigInt(o.low));
          const lag = BigInt(o.high) - pos;
          out.push({ groupId: m.groupId, topic: a.topic, partition, lag: lag > 0n ? Number(lag) : 0 });
        }
      }
    }
    return out;
  }

  /**
   * Every record of a (logical) topic from its earliest offset up to its end as it is now (the high
   * watermarks read first), in offset order per partition. A consumer of a throwaway group that
   * commits nothing (kafkajs has no manual assignment); rejects after `timeoutMs`.
   */
  async readToEnd(topic: string, timeoutMs = 60_000): Promise<BusRecord[]> {
    const admin = await this.sharedAdmin();
    const physical = this.physical(topic);
    const ends = new Map<number, bigint>();
    for (const o of await admin.fetchTopicOffsets(physical))
      if (BigInt(o.high) > BigInt(o.low)) ends.set(o.partition, BigInt(o.high));
    if (ends.size === 0) return [];
    const groupId = `${this.groupId}.read-${topic}.${Date.now().toString(36)}${Math.random().toString(36).slice(2, 8)}`;
    const consumer = this.kafka.consumer({
      groupId,
      maxWaitTimeInMs: this.opts.maxWaitTimeMs ?? DEFAULTS.maxWaitTimeMs,
      maxBytesPerPartition: this.opts.maxBytesPerPartition ?? DEFAULTS.maxBytesPerPartition,
      allowAutoTopicCreation: false,
    });
    const out: BusRecord[] = [];
    try {
      await consumer.connect();
      await consumer.subscribe({ topics: [physical], fromBeginning: true });
      await new Promise<void>((resolve, reject) => {
        const timer = setTimeout(
          () => reject(new Error(`reading ${physical} to its end took over ${timeoutMs} ms`)),
          timeoutMs,
        );
        consumer.on(consumer.events.CRASH, (e) => {
          if (!e.payload.restart) {
            clearTimeout(timer);
            reject(e.payload.error);
          }
        });
        consumer
          .run({
            autoCommit: false,
            eachBatch: async ({ batch }) => {
              const end = ends.get(batch.partition);
              if (end === undefined) return;
              for (const m of batch.messages)
                if (BigInt(m.offset) < end) out.push(this.toRecord(topic, batch.partition, m));
              const last = batch.messages[batch.messages.length - 1];
              if (last && BigInt(last.offset) + 1n >= end) ends.delete(batch.partition);
              if (ends.size === 0) {
                clearTimeout(timer);
                resolve();
              }
            },
          })
          .catch((e: unknown) => {
            clearTimeout(timer);
            reject(e);
          });
      });
    } finally {
      await consumer.disconnect().catch(() => undefined);
      // The group holds no offsets; deleting it keeps the broker's group list clean.
      await admin.deleteGroups([groupId]).catch(() => undefined);
    }
    return out.sort((a, b) =>
      a.partition !== b.partition
        ? a.partition! - b.partition!
        : Number(BigInt(a.offset!) - BigInt(b.offset!)),
    );
  }

  private adminReady: Promise<Admin> | undefined;
  private sharedAdmin(): Promise<Admin> {
    if (!this.adminReady) {
      const admin = this.kafka.admin();
      this.adminReady = admin.connect().then(
        () => admin,
        (e: unknown) => {
          this.adminReady = undefined;
          throw e;
        },
      );
    }
    return this.adminReady;
  }

  /** Partitions of a (logical) topic, from the cluster's metadata; cached. */
  async partitionCount(topic: string): Promise<number> {
    const cached = this.partitionCounts.get(topic);
    if (cached !== undefined) return cached;
    const admin = await this.sharedAdmin();
    const meta = await admin.fetchTopicMetadata({ topics: [this.physical(topic)] });
    const n = meta.topics[0]?.partitions.length ?? 0;
    if (n === 0) throw new Error(`topic ${this.physical(topic)} has no partitions`);
    this.partitionCounts.set(topic, n);
    return n;
  }
  private readonly partitionCounts = new Map<string, number>();
  private readonly partitionLookups = new Set<string>();

  /**
   * The partition count if known, else 0 and a lookup in the background. It only sizes requests
   * (kafkajs partitions with its own metadata), so a publish never waits for it: until it is
   * known, every record counts against every partition.
   */
  private knownPartitions(topic: string): number {
    const n = this.partitionCounts.get(topic);
    // Only while the producer is healthy: a lookup started while the broker is away would hold the
    // shared admin client in its connection retries, and a rebuild after the broker's return waits
    // for that client.
    const healthy = this.producerConnected && this.producerError === undefined;
    if (n === undefined && healthy && !this.partitionLookups.has(topic) && !this.closed) {
      this.partitionLookups.add(topic);
      void this.partitionCount(topic)
        .catch(() => undefined)
        .finally(() => this.partitionLookups.delete(topic));
    }
    return n ?? 0;
  }

  /**
   * Publishes records whose partition is chosen by another key than the record key (partials:
   * keyed `nodeKey|partition` for compaction, partitioned by nodeKey so that one node's partials
   * meet in one aggregator). Same Java murmur2 rule as the producer's partitioner.
   */
  async publishPartitioned(topic: string, records: (OutRecord & { partitionKey: string })[]): Promise<void> {
    if (records.length === 0) return;
    const n = await this.partitionCount(topic);
    await this.sendInOrder(
      topic,
      records.map((r) => ({ key: r.key, value: r.value, partition: javaPartition(r.partitionKey, n) })),
      (m) => m.partition,
    );
  }

  private toRecord(topic: string, partition: number, m: KafkaMessage): BusRecord {
    // A record our fetch decoder read: its text straight from the fetched bytes.
    if (m instanceof PlainMessage)
      return {
        topic,
        partition,
        offset: m.offset,
        key: m.keyText(),
        value: m.valueText() ?? '',
        timestamp: m.timestampMs,
      };
    return {
      topic,
      partition,
      offset: m.offset,
      key: m.key ? m.key.toString('utf8') : null,
      // A tombstone has no value; the empty string reaches the validator and is rejected with a
      // reason there, rather than vanishing here.
      value: m.value ? m.value.toString('utf8') : '',
      timestamp: Number(m.timestamp),
    };
  }

  private watch(member: Member): void {
    const { consumer } = member;
    const ev = consumer.events;
    // Only the member's current consumer speaks for it (an old one disconnects after a replacement).
    const current = () => member.consumer === consumer;
    consumer.on(ev.CONNECT, () => this.updateConnected());
    consumer.on(ev.FETCH, () => {
      if (!current()) return;
      member.lastFetchAt = Date.now();
      if (member.lastError !== undefined && member.state === 'joined') member.lastError = undefined;
      this.updateConnected();
    });
    consumer.on(ev.REBALANCING, () => {
      if (!current()) return;
      member.state = 'rebalancing';
      this.forgetAssignment(member);
      this.updateConnected();
      this.opts.onRebalance?.({ kind: 'rebalancing', groupId: member.groupId });
    });
    consumer.on(ev.GROUP_JOIN, (e) => {
      if (!current()) return;
      member.state = 'joined';
      member.lastFetchAt = Date.now();
      member.assignment = Object.entries(e.payload.memberAssignment)
        .map(([t, partitions]) => ({
          topic: this.logical(t),
          partitions: [...partitions].sort((a, b) => a - b),
        }))
        .sort((a, b) => (a.topic < b.topic ? -1 : a.topic > b.topic ? 1 : 0));
      member.positions = new Map();
      this.updateConnected();
      this.opts.onRebalance?.({ kind: 'assigned', groupId: member.groupId, assignment: member.assignment });
      if (member.opts.rebuild) {
        const generation = ++member.generation;
        member.live = false;
        member.progress = new Map();
        member.opts.onPhase?.({
          phase: 'restoring',
          groupId: member.groupId,
          generation,
          assignment: member.assignment,
        });
        const prep = this.prepareRebuild(member, generation).then(() => this.maybeGoLive(member, generation));
        member.prep = prep.catch((err: unknown) => {
          // The batch handler awaits this: failing it fails the batch, and kafkajs restarts the member.
          this.opts.logger?.error(
            { groupId: member.groupId, err: (err as Error).message },
            'rebuild preparation failed',
          );
          throw err;
        });
        member.prep.catch(() => undefined);
      }
    });
    consumer.on(ev.CRASH, (e) => {
      if (!current()) return;
      member.state = e.payload.restart ? 'connecting' : 'crashed';
      member.assignment = [];
      member.lastError = e.payload.error.message;
      this.opts.logger?.warn(
        { groupId: member.groupId, restart: e.payload.restart, err: e.payload.error.message },
        'kafka consumer crashed',
      );
      if (!e.payload.restart) this.replaceCrashed(member);
      this.updateConnected();
    });
    consumer.on(ev.STOP, () => {
      if (!current()) return;
      member.state = 'stopped';
      this.updateConnected();
    });
  }

  private connectProducer(): Promise<Producer> {
    if (this.closed) return Promise.reject(new Error('kafka bus is closed'));
    if (!this.producerReady) {
      const producer = this.kafka.producer({
        // The Java client's murmur2 partitioner, named explicitly: a key lands on the same
        // partition whichever client (ours, or an upstream in another language) produced it.
        createPartitioner: memoizedJavaPartitioner(Partitioners.DefaultPartitioner),
        idempotent: true,
        maxInFlightRequests: positiveInt('maxInFlightRequests', this.opts.maxInFlightRequests, 1, 1, 5),
        allowAutoTopicCreation: false,
      });
      producer.on(producer.events.CONNECT, () => {
        this.producerConnected = true;
        this.updateConnected();
      });
      producer.on(producer.events.DISCONNECT, () => {
        this.producerConnected = false;
        this.updateConnected();
      });
      this.producer = producer;
      this.producerReady = producer.connect().then(
        () => producer,
        (e: unknown) => {
          this.producerReady = undefined;
          this.producerError = (e as Error).message;
          throw e;
        },
      );
    }
    return this.producerReady;
  }

  /** Connects the producer now rather than on the first publish (so /readyz can tell early). */
  async connect(): Promise<void> {
    await this.connectProducer();
  }

  /** Pauses fetching of the given logical topics (all subscribed ones by default). */
  pause(topics?: string[]): void {
    for (const m of this.members) {
      const ts = (topics ?? m.topics).filter((t) => m.topics.includes(t));
      if (ts.length && m.state !== 'stopped') m.consumer.pause(ts.map((t) => ({ topic: this.physical(t) })));
    }
  }

  resume(topics?: string[]): void {
    for (const m of this.members) {
      const ts = (topics ?? m.topics).filter((t) => m.topics.includes(t));
      if (ts.length && m.state !== 'stopped') m.consumer.resume(ts.map((t) => ({ topic: this.physical(t) })));
    }
  }

  /** Partitions currently owned, per group. */
  assignments(): { groupId: string; assignment: PartitionAssignment[] }[] {
    return this.members
      .filter((m) => m.state !== 'stopped')
      .map((m) => ({ groupId: m.groupId, assignment: m.assignment }));
  }

  /**
   * Connected: the producer is connected with no failed publish outstanding, and every consumer is
   * in its group and fetched recently. What /readyz reports.
   */
  get connected(): boolean {
    const now = Date.now();
    const producerOk =
      this.producer === undefined
        ? this.members.length > 0
        : this.producerConnected && this.producerError === undefined;
    const consumersOk = this.members.every(
      (m) => m.state === 'stopped' || (m.state === 'joined' && now - m.lastFetchAt <= this.fetchStaleAfterMs),
    );
    return !this.closed && producerOk && consumersOk;
  }

  status(): KafkaBusStatus {
    return {
      connected: this.connected,
      producer: {
        connected: this.producerConnected,
        ...(this.producerError !== undefined ? { lastError: this.producerError } : {}),
      },
      consumers: this.members.map((m) => ({
        groupId: m.groupId,
        topics: m.topics,
        state: m.state,
        assignment: m.assignment,
        ...(m.lastError !== undefined ? { lastError: m.lastError } : {}),
      })),
    };
  }

  private updateConnected(): void {
    const now = this.connected;
    if (now !== this.lastConnected) {
      this.lastConnected = now;
      this.opts.onConnectionChange?.(now);
    }
  }

  /**
   * Stops the consumers first (each finishes its current batch, whose publishes need the
   * producer), then the producer. Idempotent.
   */
  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    clearInterval(this.staleTimer);
    // Deferred commits whose outputs are already acknowledged land before the group is left; a
    // commit still waiting for outputs after a few seconds is left to the next owner to redo.
    const commits = this.members.flatMap((m) => [...m.commits.values()]);
    if (commits.length)
      await Promise.race([Promise.allSettled(commits), new Promise((r) => setTimeout(r, 5_000).unref())]);
    this.leaving = true;
    await Promise.allSettled(this.members.map((m) => m.consumer.disconnect()));
    if (this.adminReady) await this.adminReady.then((a) => a.disconnect()).catch(() => undefined);
    if (this.producerReady) {
      await this.producerReady.then((p) => p.disconnect()).catch(() => undefined);
    }
    this.producerConnected = false;
    this.updateConnected();
  }
}

// The lag reporter lives beside the bus; re-exported here since the package index lists kafka.ts.
export { startLagReporter } from './kafka-lag.ts';
export type { LagReporter, LagSink } from './kafka-lag.ts';
