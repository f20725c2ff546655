import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { fastBatchClass, withinOffset } from './kafka-batch.ts';

// The reference is kafkajs 2.2.4's own consumer Batch, loaded from node_modules by path: the fast
// one must hold the same fields and answer every method the same.
const require = createRequire(import.meta.url);
const root = require.resolve('kafkajs/package.json').replace(/package\.json$/, '');
const Batch = require(root + 'src/consumer/batch.js') as new (
  t: string,
  o: unknown,
  d: unknown,
) => Record<string, unknown>;
const Long = require(root + 'src/utils/long.js');
const filterAborted = require(root + 'src/consumer/filterAbortedMessages.js');
const FastBatch = fastBatchClass(Batch, Long, filterAborted) as unknown as typeof Batch;

const METHODS = [
  'isEmpty',
  'isEmptyIncludingFiltered',
  'isEmptyDueToFiltering',
  'isEmptyControlRecord',
  'isEmptyDueToLogCompactedMessages',
  'firstOffset',
  'lastOffset',
  'offsetLag',
  'offsetLagLow',
];

function msg(offset: string, extra: Record<string, unknown> = {}) {
  return {
    offset,
    key: Buffer.from('k'),
    value: Buffer.from('v'),
    isControlRecord: false,
    batchContext: { producerId: '7', inTransaction: false },
    ...extra,
  };
}

function same(fetchedOffset: unknown, data: Record<string, unknown>) {
  const a = new Batch('t', fetchedOffset, data);
  const b = new FastBatch('t', fetchedOffset, data);
  expect(b).toBeInstanceOf(Batch);
  expect({ ...b }).toEqual({ ...a });
  for (const m of METHODS)
    expect((b[m] as () => unknown).call(b), m).toEqual((a[m] as () => unknown).call(a));
  return b;
}

describe('fast consumer Batch, against kafkajs 2.2.4 Batch', () => {
  it('keeps the messages at or after the fetched offset, as kafkajs does', () => {
    const messages = ['8', '9', '10', '11', '12'].map((o) => msg(o));
    for (const fetched of ['0', '8', '10', '12', '13', 10, '9007199254740993'])
      same(fetched, { partition: 2, highWatermark: '20', messages });
    expect((same('10', { partition: 2, highWatermark: '20', messages }).messages as unknown[]).length).toBe(
      3,
    );
  });

  it('compares offsets beyond 2^53 through kafkajs Long (a double cannot tell them apart)', () => {
    const messages = ['9007199254740992', '9007199254740993', '9007199254740994'].map((o) => msg(o));
    const b = same('9007199254740993', { partition: 0, highWatermark: '9007199254740995', messages });
    expect((b.messages as { offset: string }[]).map((m) => m.offset)).toEqual([
      '9007199254740993',
      '9007199254740994',
    ]);
    expect(withinOffset(messages, '9007199254740993', Long)).toHaveLength(2);
  });

  it('drops control records and aborted transactions with kafkajs own rules; empty batches alike', () => {
    const messages = [
      msg('5'),
      msg('6', { batchContext: { producerId: '9', inTransaction: true } }),
      msg('7', {
        isControlRecord: true,
        key: Buffer.from([0, 0, 0, 0]),
        batchContext: { producerId: '9', inTransaction: true },
      }),
      msg('8'),
    ];
    const aborted = [{ producerId: '9', firstOffset: '6' }];
    same('5', { partition: 1, highWatermark: '9', messages, abortedTransactions: aborted });
    same('5', { partition: 1, highWatermark: '9', messages, abortedTransactions: [] });
    same('5', { partition: 1, highWatermark: '9', messages: [] });
    same('9', { partition: 1, highWatermark: '9', messages });
  });
});
