// kafkajs's consumer Batch, built without a BigInt per message.
//
// Why: kafkajs 2.2.4 keeps only the messages at or after the fetched offset by parsing each
// message's decimal offset into a BigInt-backed Long, a fifteenth of a streaming drain. Offsets
// below 2^53 compare exactly as doubles, so they are compared so here; anything longer goes
// through kafkajs's Long as before. Everything else (aborted transactions, control records, every
// method) is kafkajs's own: the replacement shares Batch's prototype. It must be in kafkajs's
// module cache before kafkajs's consumer loads (kafkajs-fast-paths.ts is imported ahead of
// kafkajs); if kafkajs was loaded first, or is another version, it stays out.
import { kafkajsRequire, kafkajsRoot, replaceKafkajsModule } from './kafkajs-internals.ts';

const require = kafkajsRequire;

interface Message {
  offset: string;
  isControlRecord?: boolean;
}

interface PartitionData {
  partition: number;
  highWatermark: string;
  abortedTransactions?: unknown[];
  messages: Message[];
}

type LongClass = { fromValue(v: string | number): { gte(o: unknown): boolean } };
type FilterAborted = (a: { messages: Message[]; abortedTransactions?: unknown[] }) => Message[];

/** Offsets as kafkajs writes them: decimal, and exact as a double when under 16 digits. */
function exactOffset(v: unknown): number {
  if (typeof v === 'number') return Number.isSafeInteger(v) ? v : Number.NaN;
  if (typeof v !== 'string' || v.length === 0 || v.length > 15 || !/^-?\d+$/.test(v)) return Number.NaN;
  return Number(v);
}

/** The messages at or after `fetchedOffset`, as kafkajs's Batch keeps them. */
export function withinOffset(
  messages: readonly Message[],
  fetchedOffset: unknown,
  Long: LongClass,
): Message[] {
  const fetched = exactOffset(fetchedOffset);
  const longFetched = Long.fromValue(fetchedOffset as string);
  const out: Message[] = [];
  for (const m of messages) {
    const o = m.offset;
    // the decoders write offsets as plain decimal strings; a short one is exact as a double
    const keep =
      !Number.isNaN(fetched) && typeof o === 'string' && o.length > 0 && o.length < 16
        ? Number(o) >= fetched
        : Long.fromValue(o).gte(longFetched);
    if (keep) out.push(m);
  }
  return out;
}

/** A Batch constructor with kafkajs's fields and prototype. */
export function fastBatchClass(Batch: { prototype: object }, Long: LongClass, filterAborted: FilterAborted) {
  function FastBatch(
    this: Record<string, unknown>,
    topic: string,
    fetchedOffset: unknown,
    data: PartitionData,
  ) {
    this.fetchedOffset = fetchedOffset;
    this.topic = topic;
    this.partition = data.partition;
    this.highWatermark = data.highWatermark;
    this.rawMessages = data.messages;
    const within = withinOffset(data.messages, fetchedOffset, Long);
    this.messagesWithinOffset = within;
    this.messages = filterAborted({ messages: within, abortedTransactions: data.abortedTransactions }).filter(
      (m) => !m.isControlRecord,
    );
  }
  FastBatch.prototype = Batch.prototype;
  return FastBatch as unknown as new (topic: string, fetchedOffset: unknown, data: PartitionData) => object;
}

let installed: boolean | undefined;

/** True when the fast Batch is in place; false when kafkajs's consumer was loaded before, or kafkajs is another version. */
export function installFastBatch(): boolean {
  if (installed !== undefined) return installed;
  const root = kafkajsRoot();
  installed = replaceKafkajsModule<{ prototype: object }>(
    'src/consumer/batch.js',
    ['src/consumer/consumerGroup.js'],
    (Batch) => {
      const Long = require(root + 'src/utils/long.js') as LongClass;
      const filterAborted = require(root + 'src/consumer/filterAbortedMessages.js') as FilterAborted;
      return fastBatchClass(Batch, Long, filterAborted) as unknown as { prototype: object };
    },
  );
  return installed;
}
