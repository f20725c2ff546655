import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import {
  PlainMessage,
  decodePlainBatch,
  fastDecodeMessages,
  kafkajsDecodeMessages,
} from './kafka-fetch-decoder.ts';
import type { FetchedMessage, KafkajsDecoder } from './kafka-fetch-decoder.ts';
import { rng, text } from './testing/random.ts';

// The reference is kafkajs 2.2.4 itself: record sets are written with its own RecordBatch, Record
// and MessageSet encoders and decoded by its own decodeMessages; the fast decoder must return the
// same messages, field by field (Buffers compared by content), and leave the decoder at the same
// position.
const require = createRequire(import.meta.url);
const root = require.resolve('kafkajs/package.json').replace(/package\.json$/, '');
const { RecordBatch } = require(root + 'src/protocol/recordBatch/v0/index.js') as {
  RecordBatch: (a: Record<string, unknown>) => Promise<{ buffer: Buffer }>;
};
const Record = require(root + 'src/protocol/recordBatch/record/v0/index.js') as (
  a: Record<string, unknown>,
) => unknown;
const MessageSet = require(root + 'src/protocol/messageSet/index.js') as (a: Record<string, unknown>) => {
  buffer: Buffer;
};
const { Types: Compression } = require(root + 'src/protocol/message/compression/index.js') as {
  Types: { None: number; GZIP: number };
};
const Decoder = require(root + 'src/protocol/decoder.js') as new (b: Buffer) => KafkajsDecoder;
const Long = require(root + 'src/utils/long.js') as { fromValue(v: number | string | bigint): unknown };
const recordBatchDecoder = require(root + 'src/protocol/recordBatch/v0/decoder.js') as (
  d: KafkajsDecoder,
) => Promise<{ records: FetchedMessage[] }>;

const original = kafkajsDecodeMessages();
const fast = fastDecodeMessages(original, recordBatchDecoder, Decoder);

interface BatchSpec {
  firstOffset: bigint;
  firstTimestamp: bigint;
  records: {
    key: string | null;
    value: string | null;
    offsetDelta: number;
    timestampDelta: number;
    headers?: Record<string, string | string[]>;
  }[];
  compression?: number;
  transactional?: boolean;
  producerId?: bigint;
  /** extra attribute bits set after encoding (the decoders do not check the CRC) */
  orAttributes?: number;
}

async function batchBytes(b: BatchSpec): Promise<Buffer> {
  const records = b.records.map((r) =>
    Record({
      offsetDelta: r.offsetDelta,
      timestampDelta: r.timestampDelta,
      key: r.key === null ? null : Buffer.from(r.key),
      value: r.value === null ? null : Buffer.from(r.value),
      headers: r.headers ?? {},
    }),
  );
  const enc = await RecordBatch({
    compression: b.compression ?? Compression.None,
    firstOffset: Long.fromValue(b.firstOffset),
    firstTimestamp: Long.fromValue(b.firstTimestamp),
    maxTimestamp: Long.fromValue(b.firstTimestamp + 1000n),
    partitionLeaderEpoch: 3,
    lastOffsetDelta: Math.max(0, ...b.records.map((r) => r.offsetDelta)),
    transactional: b.transactional ?? false,
    producerId: Long.fromValue(b.producerId ?? 4711n),
    producerEpoch: 2,
    firstSequence: 17,
    records,
  });
  const buf = Buffer.from(enc.buffer);
  if (b.orAttributes) buf.writeInt16BE(buf.readInt16BE(21) | b.orAttributes, 21);
  return buf;
}

/** A fetch partition's record set: int32 size, then the batches; `junk` bytes after it. */
function recordSet(batches: Buffer[], cutTail = 0, junk = 0): Buffer {
  const body = Buffer.concat(batches);
  const kept = body.subarray(0, body.length - cutTail);
  const size = Buffer.alloc(4);
  size.writeInt32BE(kept.length);
  return Buffer.concat([size, kept, Buffer.alloc(junk, 0xab)]);
}

function randomBatch(r: () => number, firstOffset: bigint, n: number): BatchSpec {
  const records: BatchSpec['records'] = [];
  for (let i = 0; i < n; i++) {
    const k = r();
    records.push({
      key: k < 0.1 ? null : k < 0.15 ? '' : text(r, 1 + Math.floor(r() * 12)),
      value: k > 0.95 ? null : text(r, Math.floor(r() * 200)),
      offsetDelta: i,
      timestampDelta: Math.floor((r() - 0.2) * 5000),
    });
  }
  return { firstOffset, firstTimestamp: 1_796_000_000_000n + BigInt(Math.floor(r() * 1e6)), records };
}

/** Every field of kafkajs's message, read through its accessors (ours makes some when read). */
const FIELDS = [
  'attributes',
  'batchContext',
  'headers',
  'isControlRecord',
  'key',
  'magicByte',
  'offset',
  'timestamp',
  'value',
] as const;
const fields = (m: FetchedMessage) => Object.fromEntries(FIELDS.map((f) => [f, m[f]]));

async function expectSame(buf: Buffer): Promise<FetchedMessage[]> {
  const a = new Decoder(buf);
  const b = new Decoder(buf);
  const want = await original(a);
  const got = await fast(b);
  expect(got.length).toBe(want.length);
  for (const [i, m] of got.entries()) {
    const w = want[i]!;
    if (!(m instanceof PlainMessage)) {
      expect(m).toEqual(w); // handed to kafkajs
      continue;
    }
    // kafkajs's message has exactly these fields, so comparing them compares everything
    expect(Object.keys(w).sort()).toEqual([...FIELDS]);
    expect(fields(m)).toEqual(fields(w));
    // the text the bus reads is the text of kafkajs's Buffers
    expect(m.keyText()).toBe(w.key?.toString('utf8') ?? null);
    expect(m.valueText()).toBe(w.value?.toString('utf8') ?? null);
    expect(m.timestampMs).toBe(Number(w.timestamp));
  }
  expect(b.offset).toBe(a.offset);
  return got;
}

describe('fast fetch decoder, against kafkajs 2.2.4 decodeMessages', () => {
  it('decodes plain batches exactly as kafkajs does (300 random records over 7 batches)', async () => {
    const r = rng(11);
    const batches: Buffer[] = [];
    let offset = 0n;
    for (let i = 0; i < 7; i++) {
      const n = 1 + Math.floor(r() * 80);
      batches.push(await batchBytes(randomBatch(r, offset, n)));
      offset += BigInt(n);
    }
    const got = await expectSame(recordSet(batches, 0, 9));
    expect(got.length).toBeGreaterThan(100);
    // and it really took the fast path for them
    expect(decodePlainBatch(batches[0]!, 0, batches[0]!.length)).not.toBeNull();
  });

  it('keeps offsets and timestamps exact near 2^52, and hands larger ones to kafkajs', async () => {
    const r = rng(5);
    for (const base of [2n ** 40n, 2n ** 52n - 10_000n, 2n ** 52n + 3n, 2n ** 62n]) {
      const spec = randomBatch(r, base, 20);
      spec.firstTimestamp = base;
      const got = await expectSame(recordSet([await batchBytes(spec)]));
      expect(got[19]!.offset).toBe(String(base + 19n));
    }
  });

  it('hands batches with headers, compression or long timestamp deltas to kafkajs, in order', async () => {
    const r = rng(9);
    const withHeaders = randomBatch(r, 0n, 5);
    withHeaders.records[1]!.headers = { trace: 'a', dup: ['x', 'y'] };
    const compressed = { ...randomBatch(r, 5n, 30), compression: Compression.GZIP };
    const longDelta = randomBatch(r, 35n, 3);
    longDelta.records[2]!.timestampDelta = 2 ** 50; // 8 varint bytes
    const plain = randomBatch(r, 38n, 10);
    const bytes = await Promise.all([withHeaders, compressed, longDelta, plain].map(batchBytes));
    expect(decodePlainBatch(bytes[0]!, 0, bytes[0]!.length)).toBeNull();
    expect(decodePlainBatch(bytes[1]!, 0, bytes[1]!.length)).toBeNull();
    expect(decodePlainBatch(bytes[2]!, 0, bytes[2]!.length)).toBeNull();
    const got = await expectSame(recordSet(bytes));
    expect(got.map((m) => m.offset)).toEqual(Array.from({ length: 48 }, (_, i) => String(i)));
    expect(got[1]!.headers).toEqual({ trace: Buffer.from('a'), dup: [Buffer.from('x'), Buffer.from('y')] });
  });

  it('stops at a partial batch at the tail, as kafkajs does (every cut of the last batch)', async () => {
    const r = rng(3);
    const a = await batchBytes(randomBatch(r, 0n, 4));
    const b = await batchBytes(randomBatch(r, 4n, 6));
    for (let cut = 1; cut < b.length; cut += 7) {
      const got = await expectSame(recordSet([a, b], cut));
      expect(got.length).toBe(4);
    }
  });

  it('reads the timestamp type, control and transaction flags and the batch context as kafkajs does', async () => {
    const r = rng(21);
    const logAppend = { ...randomBatch(r, 0n, 3), orAttributes: 0x08 };
    const control = { ...randomBatch(r, 3n, 2), orAttributes: 0x20, transactional: true, producerId: -1n };
    const got = await expectSame(recordSet(await Promise.all([logAppend, control].map(batchBytes))));
    expect(got[0]!.timestamp).toBe(got[0]!.batchContext.maxTimestamp);
    expect(got[0]!.batchContext.timestampType).toBe(1);
    expect(got[3]!.isControlRecord).toBe(true);
    expect(got[3]!.batchContext.inTransaction).toBe(true);
    expect(got[3]!.batchContext.producerId).toBe('-1');
  });

  it('hands legacy message sets, empty and oversized record sets to kafkajs', async () => {
    const legacy = MessageSet({
      messageVersion: 1,
      compression: Compression.None,
      entries: [
        { key: 'u1', value: 'v1', timestamp: 1_796_000_000_000 },
        { key: null, value: 'v2', timestamp: 1_796_000_000_001 },
      ],
    }).buffer;
    const size = Buffer.alloc(4);
    size.writeInt32BE(legacy.length);
    expect((await expectSame(Buffer.concat([size, legacy]))).length).toBe(2);
    await expectSame(Buffer.from([0, 0, 0, 0]));
    await expectSame(Buffer.from([0, 0, 1, 0, 1, 2, 3]));
  });
});
