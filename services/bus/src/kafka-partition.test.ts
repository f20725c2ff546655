import { describe, expect, it } from 'vitest';
import kafkajs from 'kafkajs';
import { javaPartition, memoizedJavaPartitioner } from './kafka-partition.ts';

const { Partitioners } = kafkajs;
const meta = (n: number, down: number[] = []) =>
  Array.from({ length: n }, (_, i) => ({
    partitionId: i,
    leader: down.includes(i) ? -1 : 0,
    replicas: [0],
    isr: [0],
    partitionErrorCode: 0,
  }));

// Keys of the shapes Keelson publishes, plus multi-byte UTF-8 and every tail length 0..3.
function keys(): string[] {
  const out = ['', 'a', 'ab', 'abc', 'abcd', 'firm', 'desk=RATESX/book=B7', 'limit-ü-7', 'κλειδί', '🦊 fox'];
  let seed = 12345;
  for (let i = 0; i < 3000; i++) {
    seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
    const len = seed % 40;
    let s = '';
    for (let j = 0; j < len; j++) {
      seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
      s += String.fromCharCode(32 + (seed % 500));
    }
    out.push(`underlying=${s}`);
  }
  return out;
}

describe('memoizedJavaPartitioner', () => {
  // Reference: kafkajs 2.2.4's own DefaultPartitioner (the Java client's murmur2 rule).
  it('places every string key where kafkajs DefaultPartitioner does, first call and memoised', () => {
    const ours = memoizedJavaPartitioner(Partitioners.DefaultPartitioner)();
    const ref = Partitioners.DefaultPartitioner();
    for (const n of [1, 3, 6, 12, 64]) {
      const partitionMetadata = meta(n);
      for (const key of keys()) {
        const args = { topic: 't', partitionMetadata, message: { key, value: 'v' } };
        const want = ref(args);
        expect(ours(args)).toBe(want);
        expect(ours(args)).toBe(want); // from the memo
        expect(javaPartition(key, n)).toBe(want);
      }
    }
  });

  it('follows the partition count it is given, not the one a key was first hashed with', () => {
    const ours = memoizedJavaPartitioner(Partitioners.DefaultPartitioner)();
    const ref = Partitioners.DefaultPartitioner();
    for (const n of [6, 12]) {
      const args = {
        topic: 't',
        partitionMetadata: meta(n),
        message: { key: 'underlying=ACME', value: 'v' },
      };
      expect(ours(args)).toBe(ref(args));
    }
  });

  it('leaves explicit partitions, Buffer keys and unkeyed records to the fallback', () => {
    const ours = memoizedJavaPartitioner(Partitioners.DefaultPartitioner)();
    const ref = Partitioners.DefaultPartitioner();
    const partitionMetadata = meta(6, [2]);
    expect(ours({ topic: 't', partitionMetadata, message: { key: 'x', value: 'v', partition: 4 } })).toBe(4);
    const buf = {
      topic: 't',
      partitionMetadata,
      message: { key: Buffer.from('underlying=ACME'), value: 'v' },
    };
    expect(ours(buf)).toBe(ref(buf));
    // No key: kafkajs's round robin over partitions with a leader (never the one that is down).
    const seen = new Set<number>();
    for (let i = 0; i < 50; i++)
      seen.add(ours({ topic: 't', partitionMetadata, message: { key: null, value: 'v' } }));
    expect([...seen].sort()).toEqual([0, 1, 3, 4, 5]);
  });
});
