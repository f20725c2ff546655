import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { javaPartition } from './kafka-partition.ts';
import { groupByPartition, installProduceGrouping } from './kafka-produce-grouping.ts';
import type { GroupArgs } from './kafka-produce-grouping.ts';
import { rng, text } from './testing/random.ts';

// The reference is kafkajs 2.2.4's own groupMessagesPerPartition, loaded from node_modules by
// path before this test installs ours.
const require = createRequire(import.meta.url);
const root = require.resolve('kafkajs/package.json').replace(/package\.json$/, '');
const path = require.resolve(root + 'src/producer/groupMessagesPerPartition.js');
const kafkajsGroup = require(path) as <M>(a: GroupArgs<M>) => Record<number, M[]>;

interface Msg {
  key: string | null;
  value: string;
  partition?: number;
}

describe('groupByPartition', () => {
  it('groups as kafkajs does: the same partitions, in the same key order, each in send order', () => {
    const r = rng(20261202);
    for (let round = 0; round < 200; round++) {
      const partitions = 1 + Math.floor(r() * 12);
      const partitionMetadata = Array.from({ length: partitions }, (_, p) => ({ partitionId: p }));
      const messages: Msg[] = Array.from({ length: Math.floor(r() * 400) }, (_, i) => ({
        key: r() < 0.1 ? null : text(r, 1 + Math.floor(r() * 20)),
        value: `v${i}`,
        ...(r() < 0.05 ? { partition: Math.floor(r() * partitions) } : {}),
      }));
      // the Java client's rule for keyed messages, an explicit partition kept, round robin otherwise
      let next = 0;
      const partitioner: GroupArgs<Msg>['partitioner'] = ({ message }) =>
        message.partition ??
        (message.key === null ? next++ % partitions : javaPartition(message.key, partitions));
      const args = { topic: 't', partitionMetadata, messages, partitioner };
      const ours = groupByPartition(args);
      next = 0;
      const theirs = kafkajsGroup(args);
      expect(Object.keys(ours)).toEqual(Object.keys(theirs));
      expect(ours).toEqual(theirs);
    }
  });

  it('gives nothing when the topic has no partition metadata yet, as kafkajs does', () => {
    const args = {
      topic: 't',
      partitionMetadata: [],
      messages: [{ key: 'a', value: '1' }],
      partitioner: () => 0,
    };
    expect(groupByPartition(args)).toEqual({});
    expect(kafkajsGroup(args)).toEqual({});
  });
});

describe('installProduceGrouping', () => {
  it("puts groupByPartition in kafkajs's module cache for the producer that loads next", () => {
    expect(installProduceGrouping()).toBe(true);
    expect(require(path)).toBe(groupByPartition);
    expect(installProduceGrouping()).toBe(true);
  });
});
