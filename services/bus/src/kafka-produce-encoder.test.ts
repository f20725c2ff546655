import { createRequire } from 'node:module';
import { afterEach, describe, expect, it, vi } from 'vitest';
import { crc32c, encodePlainProduce, installProduceEncoder, isPlain } from './kafka-produce-encoder.ts';
import type { ProduceArgs } from './kafka-produce-encoder.ts';
import { rng, text } from './testing/random.ts';

// The reference is kafkajs 2.2.4 itself: its own Produce v3 request encoder and CRC-32C, loaded
// from node_modules by path (this test never installs the fast encoder into kafkajs).
const require = createRequire(import.meta.url);
const root = require.resolve('kafkajs/package.json').replace(/package\.json$/, '');
const kafkajsV3 = require(root + 'src/protocol/requests/produce/v3/request.js') as (a: ProduceArgs) => {
  encode: () => Promise<{ buffer: Buffer }>;
};
const kafkajsCrc = require(root + 'src/protocol/recordBatch/crc32C/index.js') as (b: Buffer) => number;
const Long = require(root + 'src/utils/long.js') as { fromValue(v: number | string): unknown };

const NOW = 1_796_000_000_123;

async function reference(a: ProduceArgs): Promise<Buffer> {
  vi.spyOn(Date, 'now').mockReturnValue(NOW);
  try {
    return (await kafkajsV3(a).encode()).buffer;
  } finally {
    vi.restoreAllMocks();
  }
}

afterEach(() => vi.restoreAllMocks());

describe('crc32c', () => {
  it('gives the CRC-32C check value for "123456789" (0xE3069283, RFC 3720 appendix B.4)', () => {
    expect(crc32c(Buffer.from('123456789'))).toBe(0xe3069283);
  });

  it('equals kafkajs crc32C over lengths 0..300 and on sub-ranges', () => {
    const r = rng(7);
    for (let n = 0; n <= 300; n++) {
      const b = Buffer.from(Array.from({ length: n }, () => Math.floor(r() * 256)));
      expect(crc32c(b)).toBe(kafkajsCrc(b));
      if (n > 10) expect(crc32c(b, 3, n - 5)).toBe(kafkajsCrc(b.subarray(3, n - 5)));
    }
  });
});

describe('encodePlainProduce', () => {
  it('writes the bytes kafkajs writes: exposures-like records over several partitions', async () => {
    const r = rng(42);
    const partitions = [0, 3, 5].map((partition, k) => ({
      partition,
      firstSequence: [0, 17, 2_000_000][k],
      messages: Array.from({ length: 150 + k * 40 }, (_, i) => ({
        key: `underlying=U${i}/tenor=${k}M`,
        value: JSON.stringify({ type: 'exposure', delta: r() * 1e6, note: text(r, Math.floor(r() * 40)) }),
      })),
    }));
    const a: ProduceArgs = {
      acks: -1,
      timeout: 30_000,
      producerId: Long.fromValue(4_000_000_123),
      producerEpoch: 3,
      topicData: [{ topic: 'keelson.exposures', partitions }],
    };
    expect(isPlain(a)).toBe(true);
    expect(encodePlainProduce(a, NOW).equals(await reference(a))).toBe(true);
  });

  it('writes the bytes kafkajs writes: null, empty, Buffer and multi-byte keys and values, long values, several topics', async () => {
    const r = rng(3);
    const long = text(r, 20_000); // a value length that needs a three-byte varint
    const a: ProduceArgs = {
      acks: 1,
      timeout: 5_000,
      producerId: Long.fromValue(-1),
      producerEpoch: 0,
      topicData: [
        {
          topic: 'keelson.alerts',
          partitions: [
            {
              partition: 1,
              messages: [
                { key: null, value: '{"a":1}' },
                { key: '', value: '' },
                { key: 'κλειδί', value: null },
                { key: Buffer.from([0, 255, 7]), value: Buffer.from('raw bytes') },
                { key: 'L-🦊', value: long },
              ],
            },
          ],
        },
        {
          topic: 'keelson.rejected',
          partitions: [
            { partition: 0, messages: Array.from({ length: 200 }, (_, i) => ({ value: `r${i}` })) },
          ],
        },
      ],
    };
    expect(isPlain(a)).toBe(true);
    expect(encodePlainProduce(a, NOW).equals(await reference(a))).toBe(true);
  });

  it('leaves to kafkajs what it does not write: compression, transactions, headers, timestamps, other types', () => {
    const base = (m: object): ProduceArgs => ({
      acks: -1,
      timeout: 1,
      topicData: [{ topic: 't', partitions: [{ partition: 0, messages: [m as { value: string }] }] }],
    });
    expect(isPlain({ ...base({ value: 'x' }), compression: 1 })).toBe(false);
    expect(isPlain({ ...base({ value: 'x' }), transactionalId: 'tx' })).toBe(false);
    expect(isPlain(base({ value: 'x', headers: { h: 'v' } }))).toBe(false);
    expect(isPlain(base({ value: 'x', timestamp: '1' }))).toBe(false);
    expect(isPlain(base({ value: 42 }))).toBe(false);
    expect(isPlain(base({ value: 'x', headers: {} }))).toBe(true);
  });

  it('takes the producer id in each form kafkajs hands it (Long, number, string)', async () => {
    for (const producerId of [Long.fromValue(9_007_199_254_740_000), 12_345, '77', undefined]) {
      const a: ProduceArgs = {
        acks: -1,
        timeout: 30_000,
        producerId,
        producerEpoch: 1,
        topicData: [
          {
            topic: 't',
            partitions: [{ partition: 2, firstSequence: 9, messages: [{ key: 'k', value: 'v' }] }],
          },
        ],
      };
      expect(encodePlainProduce(a, NOW).equals(await reference(a))).toBe(true);
    }
  });
});

describe('installProduceEncoder', () => {
  it('sits in front of kafkajs 2.2.4 Produce v3, writes plain requests itself and hands the rest to kafkajs', async () => {
    expect(installProduceEncoder()).toBe(true);
    const v3Path = require.resolve(root + 'src/protocol/requests/produce/v3/request.js');
    const installed = require(v3Path) as typeof kafkajsV3;
    expect(installed).not.toBe(kafkajsV3);
    const plain: ProduceArgs = {
      acks: -1,
      timeout: 30_000,
      producerId: Long.fromValue(5),
      producerEpoch: 0,
      topicData: [{ topic: 't', partitions: [{ partition: 0, messages: [{ key: 'a', value: 'b' }] }] }],
    };
    const gz: ProduceArgs = { ...plain, compression: 1 };
    vi.spyOn(Date, 'now').mockReturnValue(NOW);
    const [ours, oursGz] = [(await installed(plain).encode()).buffer, (await installed(gz).encode()).buffer];
    vi.restoreAllMocks();
    expect(ours.equals(await reference(plain))).toBe(true);
    expect(oursGz.equals(await reference(gz))).toBe(true);
  });
});
