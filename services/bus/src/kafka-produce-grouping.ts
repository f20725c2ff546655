// kafkajs 2.2.4 sorts a send's messages into partitions by copying each partition's array once
// per message (`[...current, message]`): quadratic in the messages of a partition, a millisecond
// or two for a flush of a thousand exposures, on the path from valuation to the bus. This is the
// same grouping, in one pass. Installed into kafkajs's module cache (kafkajs-fast-paths.ts) ahead
// of the producer module that captures it.
import { replaceKafkajsModule } from './kafkajs-internals.ts';

/** kafkajs's `groupMessagesPerPartition` arguments (structural: this module needs no kafkajs types). */
export interface GroupArgs<M> {
  topic: string;
  partitionMetadata: readonly unknown[];
  messages: readonly M[];
  partitioner: (a: { topic: string; partitionMetadata: readonly unknown[]; message: M }) => number;
}

/** Messages by the partition their partitioner gives, each partition's in send order. */
export function groupByPartition<M>({
  topic,
  partitionMetadata,
  messages,
  partitioner,
}: GroupArgs<M>): Record<number, M[]> {
  const result: Record<number, M[]> = {};
  if (partitionMetadata.length === 0) return result;
  for (const message of messages) {
    const partition = partitioner({ topic, partitionMetadata, message });
    const list = result[partition];
    if (list) list.push(message);
    else result[partition] = [message];
  }
  return result;
}

let installed: boolean | undefined;

/** True when kafkajs's producer groups with `groupByPartition`; false when it was loaded before, or kafkajs is another version. */
export function installProduceGrouping(): boolean {
  installed ??= replaceKafkajsModule(
    'src/producer/groupMessagesPerPartition.js',
    ['src/producer/sendMessages.js'],
    () => groupByPartition,
  );
  return installed;
}
