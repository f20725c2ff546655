// The topics Keelson reads and writes, with the partitioning and retention each one needs, and an
// idempotent "make it so" against a cluster. The broker creates no topics by itself (see
// deploy/local-kafka), so this is the one place where their shape is decided.
import type { Admin, ITopicConfig } from 'kafkajs';
import { TOPICS } from '@keelson/shared-types';

export type TopicRole = 'input' | 'output' | 'internal';

export interface TopicSpec {
  /** Logical name (the prefix is added by the caller). */
  name: string;
  role: TopicRole;
  partitions: number;
  /** Keyed inputs that must share a partition count, so one key's messages meet on one partition. */
  coPartitioned: boolean;
  configs: Record<string, string>;
  why: string;
}

export interface TopicPlanOptions {
  /** Partitions of the co-partitioned inputs and of the outputs; default 6. */
  partitions?: number;
  /** Retention of alerts and rejected records, in days; default 7. */
  retentionDays?: number;
}

const DAY_MS = 86_400_000;

/**
 * Compaction settings: roll segments hourly so the cleaner has closed segments to work on, and keep
 * deleted keys' tombstones a day so a slow reader still sees the deletion.
 */
const COMPACTED = {
  'cleanup.policy': 'compact',
  'segment.ms': String(3_600_000),
  'min.cleanable.dirty.ratio': '0.1',
  'delete.retention.ms': String(DAY_MS),
};

export function topicPlan(opts: TopicPlanOptions = {}): TopicSpec[] {
  const n = opts.partitions ?? 6;
  if (!Number.isInteger(n) || n < 1 || n > 10_000)
    throw new RangeError(`partitions must be an integer in 1..10000, got ${n}`);
  const days = opts.retentionDays ?? 7;
  if (!(days > 0) || !Number.isFinite(days)) throw new RangeError(`retention days must be > 0, got ${days}`);
  const retained = { 'cleanup.policy': 'delete', 'retention.ms': String(Math.round(days * DAY_MS)) };
  return [
    // Keyed by underlying, co-partitioned: a trade and the market data it is priced on share a
    // partition, so one engine instance owns everything an underlying needs.
    {
      name: TOPICS.refdata,
      role: 'input',
      partitions: n,
      coPartitioned: true,
      configs: COMPACTED,
      why: 'latest reference data per underlying',
    },
    {
      name: TOPICS.spots,
      role: 'input',
      partitions: n,
      coPartitioned: true,
      configs: COMPACTED,
      why: 'latest spot per underlying survives for a rebuild',
    },
    {
      name: TOPICS.vols,
      role: 'input',
      partitions: n,
      coPartitioned: true,
      configs: COMPACTED,
      why: 'a surface replaces the previous one whole',
    },
    // Trades are events, not state: every version matters to the book, so nothing is compacted
    // or expired away.
    {
      name: TOPICS.trades,
      role: 'input',
      partitions: n,
      coPartitioned: true,
      configs: { 'cleanup.policy': 'delete', 'retention.ms': '-1' },
      why: 'the book is rebuilt from every trade event',
    },
    // Few keys, read whole by every instance: one partition keeps them in one order.
    {
      name: TOPICS.curves,
      role: 'input',
      partitions: 1,
      coPartitioned: false,
      configs: COMPACTED,
      why: 'a curve replaces the previous one whole; every instance reads all',
    },
    {
      name: TOPICS.limits,
      role: 'input',
      partitions: 1,
      coPartitioned: false,
      configs: COMPACTED,
      why: 'latest definition or removal per limitId; every instance reads all',
    },
    {
      name: TOPICS.exposures,
      role: 'output',
      partitions: n,
      coPartitioned: false,
      configs: COMPACTED,
      why: 'latest exposure per node',
    },
    {
      name: TOPICS.alerts,
      role: 'output',
      partitions: n,
      coPartitioned: false,
      configs: retained,
      why: 'every limit state change, in order per limit',
    },
    {
      name: TOPICS.rejected,
      role: 'output',
      partitions: n,
      coPartitioned: false,
      configs: retained,
      why: 'dead letters with their origin',
    },
    {
      name: TOPICS.partials,
      role: 'internal',
      partitions: n,
      coPartitioned: false,
      configs: COMPACTED,
      why: "each engine partition's latest partial sums per node",
    },
  ];
}

export interface TopicReport {
  topic: string;
  status: 'created' | 'exists';
  partitions: number;
  configs: Record<string, string>;
  /** Differences between the topic found and the plan; problems are what breaks correctness. */
  notes: string[];
  problems: string[];
}

/**
 * Resolves with the topics' metadata once every partition of each has a leader; retries while the
 * cluster still settles a new topic, and gives up after timeoutMs.
 */
export async function waitForTopics(
  admin: Admin,
  topics: string[],
  timeoutMs = 30_000,
): ReturnType<Admin['fetchTopicMetadata']> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    let why: string;
    try {
      const meta = await admin.fetchTopicMetadata({ topics });
      const leaderless = meta.topics.filter(
        (t) => t.partitions.length === 0 || t.partitions.some((p) => p.leader < 0),
      );
      if (leaderless.length === 0 && meta.topics.length === topics.length) return meta;
      why = `no leader yet for ${leaderless.map((t) => t.name).join(', ')}`;
    } catch (e) {
      const type = (e as { type?: string }).type;
      if (type !== 'UNKNOWN_TOPIC_OR_PARTITION' && type !== 'LEADER_NOT_AVAILABLE') throw e;
      why = (e as Error).message;
    }
    if (Date.now() > deadline) throw new Error(`topics not ready after ${timeoutMs} ms: ${why}`);
    await new Promise((r) => setTimeout(r, 100));
  }
}

/** The configs the plan cares about, as the broker reports them. */
async function describeConfigs(admin: Admin, topics: string[]): Promise<Map<string, Record<string, string>>> {
  const out = new Map<string, Record<string, string>>();
  if (topics.length === 0) return out;
  const res = await admin.describeConfigs({
    includeSynonyms: false,
    resources: topics.map((name) => ({ type: 2 /* ConfigResourceTypes.TOPIC */, name })),
  });
  for (const r of res.resources) {
    const c: Record<string, string> = {};
    for (const e of r.configEntries) c[e.configName] = e.configValue;
    out.set(r.resourceName, c);
  }
  return out;
}

/**
 * Creates every planned topic that is missing and checks the ones that exist. Safe to run any
 * number of times, also concurrently (a topic created by someone else in between counts as found).
 */
export async function ensureTopics(
  admin: Admin,
  prefix: string,
  plan: TopicSpec[],
  opts: { replicationFactor?: number } = {},
): Promise<TopicReport[]> {
  const existing = new Set(await admin.listTopics());
  const missing = plan.filter((s) => !existing.has(prefix + s.name));
  const created = new Set<string>();
  if (missing.length > 0) {
    const topics: ITopicConfig[] = missing.map((s) => ({
      topic: prefix + s.name,
      numPartitions: s.partitions,
      replicationFactor: opts.replicationFactor ?? -1, // -1: the broker's default.replication.factor
      configEntries: Object.entries(s.configs).map(([name, value]) => ({ name, value })),
    }));
    // A topic counts as created when this call created it. Listing topics right after the
    // request is no test of that: a KRaft broker may not list a new topic for a moment.
    let alreadyThere = new Set<string>();
    try {
      // kafkajs's own waitForLeaders retries only LEADER_NOT_AVAILABLE, but a KRaft broker may
      // still answer UNKNOWN_TOPIC_OR_PARTITION for a moment: wait below instead.
      await admin.createTopics({ topics, waitForLeaders: false });
    } catch (e) {
      // Only "already exists" is benign (a concurrent creator); kafkajs reports it per topic.
      const errors = (e as { errors?: { type?: string; topic?: string }[] }).errors;
      if (!errors || !errors.every((x) => x.type === 'TOPIC_ALREADY_EXISTS')) throw e;
      alreadyThere = new Set(errors.map((x) => x.topic ?? ''));
    }
    for (const s of missing) if (!alreadyThere.has(prefix + s.name)) created.add(s.name);
  }

  const names = plan.map((s) => prefix + s.name);
  const meta = await waitForTopics(admin, names);
  const partitionsOf = new Map(meta.topics.map((t) => [t.name, t.partitions.length]));
  const configsOf = await describeConfigs(admin, names);

  const coCount = new Map<number, string[]>();
  const reports = plan.map((s): TopicReport => {
    const topic = prefix + s.name;
    const partitions = partitionsOf.get(topic) ?? 0;
    const found = configsOf.get(topic) ?? {};
    const notes: string[] = [];
    const problems: string[] = [];
    if (partitions !== s.partitions)
      notes.push(`has ${partitions} partitions, the plan says ${s.partitions}`);
    if (s.coPartitioned) coCount.set(partitions, [...(coCount.get(partitions) ?? []), topic]);
    for (const [k, v] of Object.entries(s.configs)) {
      if (found[k] === undefined || found[k] === v) continue;
      // A different cleanup policy changes what a rebuild reads; other settings are tuning.
      (k === 'cleanup.policy' ? problems : notes).push(`${k}=${found[k]}, the plan says ${v}`);
    }
    const shown: Record<string, string> = {};
    for (const k of Object.keys(s.configs)) if (found[k] !== undefined) shown[k] = found[k];
    return {
      topic,
      status: created.has(s.name) ? 'created' : 'exists',
      partitions,
      configs: shown,
      notes,
      problems,
    };
  });
  if (coCount.size > 1) {
    const detail = [...coCount.entries()].map(([n, ts]) => `${ts.join(', ')}: ${n}`).join('; ');
    for (const r of reports) {
      if (plan.find((s) => prefix + s.name === r.topic)?.coPartitioned) {
        r.problems.push(
          `co-partitioned inputs differ in partition count (${detail}): keys would not meet on one partition`,
        );
      }
    }
  }
  return reports;
}
