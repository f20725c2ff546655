// A faster decoder for the record sets in kafkajs's Fetch responses (fetch v4-v11 share it).
//
// Why: draining a topic of small JSON ticks, a bare kafkajs 2.2.4 consumer spends most of its CPU
// decoding records: per record a Decoder object, a Buffer slice of the whole record, a 64-bit
// varint built from Long/BigInt arithmetic, two decimal strings parsed back into BigInts to add
// the batch's base offset and timestamp, and a header object built by spreading. That is the
// ceiling of any consumer built on kafkajs, the engine included. This decoder returns the same
// messages (the unit test compares them with kafkajs's own decoder, field by field) reading the
// varints in place and adding offsets and timestamps as numbers while they are exact.
//
// Scope: only the plain case: record batches (magic 2) without compression, without record
// headers, with base offset and timestamps below 2^52 and timestamp deltas that fit 7 varint
// bytes. Any other batch (and any legacy message set) is handed to kafkajs's own decoder, as is
// a batch whose bytes do not parse as expected. It is installed into kafkajs's module cache, so it
// applies to kafkajs 2.2.4 only (its internal layout), and only if no fetch response was decoded
// before.
import { kafkajsRequire, kafkajsRoot, replaceKafkajsModule } from './kafkajs-internals.ts';

const require = kafkajsRequire;

/** kafkajs's Decoder, the part used here. */
export interface KafkajsDecoder {
  buffer: Buffer;
  offset: number;
  readInt32(): number;
  readBytes(n?: number): Buffer | null;
  canReadBytes(n: number): boolean;
}

/** A message as kafkajs's record decoder returns it. */
export interface FetchedMessage {
  magicByte: number;
  attributes: number;
  timestamp: string;
  offset: string;
  key: Buffer | null;
  value: Buffer | null;
  headers: Record<string, unknown>;
  isControlRecord: boolean;
  batchContext: BatchContext;
}

interface BatchContext {
  firstOffset: string;
  firstTimestamp: string;
  partitionLeaderEpoch: number;
  inTransaction: boolean;
  isControlBatch: boolean;
  lastOffsetDelta: number;
  producerId: string;
  producerEpoch: number;
  firstSequence: number;
  maxTimestamp: string;
  timestampType: number;
  magicByte: number;
}

type DecodeMessages = (decoder: KafkajsDecoder) => Promise<FetchedMessage[]>;
type RecordBatchDecoder = (decoder: KafkajsDecoder) => Promise<{ records: FetchedMessage[] }>;
type DecoderClass = new (buffer: Buffer) => KafkajsDecoder;

// Layout constants as kafkajs's fetch/v4/decodeMessages.js and recordBatch/v0/decoder.js use them.
const MAGIC_OFFSET = 16;
const RECORD_BATCH_OVERHEAD = 49;
const MAGIC_RECORD_BATCH = 2;
const COMPRESSION_MASK = 0x07;
const TIMESTAMP_TYPE_FLAG = 0x08;
const TRANSACTIONAL_FLAG = 0x10;
const CONTROL_FLAG = 0x20;
/** kafkajs's TimestampTypes: CREATE_TIME 0, LOG_APPEND_TIME 1. */
const LOG_APPEND_TIME = 1;
const CREATE_TIME = 0;
/** Offsets and timestamps below this add to a 32-bit delta exactly in a double. */
const EXACT = 2 ** 52;

/** Not the plain case: the batch goes to kafkajs's decoder. */
const NOT_PLAIN = null;

/** Read position of the varint readers below (one decoder runs at a time: it never awaits). */
let cursor = 0;

/** A zigzag varint as kafkajs's readVarInt reads it (32-bit), at `cursor`; NaN past `end`. */
function zigzag32(buf: Buffer, end: number): number {
  let shift = 0;
  let raw = 0;
  let b: number;
  do {
    if (cursor >= end) return Number.NaN;
    b = buf[cursor++] as number;
    raw += (b & 0x7f) << shift;
    shift += 7;
  } while (b >= 0x80);
  return (raw >>> 1) ^ -(raw & 1);
}

/** A zigzag varlong of at most 7 bytes (49 bits, exact as a double); NaN if longer or past `end`. */
function zigzag49(buf: Buffer, end: number): number {
  let raw = 0;
  let scale = 1;
  let bytes = 0;
  let b: number;
  do {
    if (cursor >= end || ++bytes > 7) return Number.NaN;
    b = buf[cursor++] as number;
    raw += (b & 0x7f) * scale;
    scale *= 128;
  } while (b >= 0x80);
  return raw % 2 === 1 ? -(raw + 1) / 2 : raw / 2;
}

/** End of the bytes whose start `varSpan` returned last. */
let spanEnd = 0;

/**
 * Start of varint-length bytes at `cursor` (they end at `spanEnd`): -1 for none (length -1), -2
 * when they do not fit before `end`.
 */
function varSpan(buf: Buffer, end: number): number {
  const n = zigzag32(buf, end);
  if (n === -1) return -1;
  if (Number.isNaN(n) || n < 0 || cursor + n > end) return -2;
  const start = cursor;
  cursor += n;
  spanEnd = cursor;
  return start;
}

/**
 * A record of a plain batch: kafkajs's message, except that its key, value and headers are made
 * when read. A reader that wants text (`keyText`, `valueText`, `timestampMs`: the bus's records)
 * never has a Buffer view, a header object or a timestamp string made for it.
 */
export class PlainMessage implements FetchedMessage {
  constructor(
    readonly magicByte: number,
    readonly attributes: number,
    /** The record's timestamp in ms since the epoch (exact: the batch's are below 2^52). */
    readonly timestampMs: number,
    /** kafkajs's text of a log-append time (the batch's max timestamp), else undefined. */
    private readonly timestampText: string | undefined,
    readonly offset: string,
    readonly isControlRecord: boolean,
    readonly batchContext: BatchContext,
    private readonly buf: Buffer,
    private readonly keyStart: number,
    private readonly keyEnd: number,
    private readonly valueStart: number,
    private readonly valueEnd: number,
  ) {}

  get timestamp(): string {
    return this.timestampText ?? String(this.timestampMs);
  }

  get key(): Buffer | null {
    return this.keyStart < 0 ? null : this.buf.subarray(this.keyStart, this.keyEnd);
  }

  get value(): Buffer | null {
    return this.valueStart < 0 ? null : this.buf.subarray(this.valueStart, this.valueEnd);
  }

  /** The plain case has no headers. */
  get headers(): Record<string, unknown> {
    return {};
  }

  keyText(): string | null {
    return this.keyStart < 0 ? null : this.buf.toString('utf8', this.keyStart, this.keyEnd);
  }

  valueText(): string | null {
    return this.valueStart < 0 ? null : this.buf.toString('utf8', this.valueStart, this.valueEnd);
  }
}

/**
 * The records of one plain record batch starting at `start` of `buf` (its total length known to
 * be in the buffer), or null when the batch is not the plain case.
 */
export function decodePlainBatch(buf: Buffer, start: number, end: number): FetchedMessage[] | null {
  const attributes = buf.readInt16BE(start + 21);
  if ((attributes & COMPRESSION_MASK) !== 0) return NOT_PLAIN;
  const firstOffsetBig = buf.readBigInt64BE(start);
  const firstTimestampBig = buf.readBigInt64BE(start + 27);
  const maxTimestampBig = buf.readBigInt64BE(start + 35);
  const firstOffsetN = Number(firstOffsetBig);
  const firstTimestampN = Number(firstTimestampBig);
  if (!(Math.abs(firstOffsetN) < EXACT && Math.abs(firstTimestampN) < EXACT)) return NOT_PLAIN;
  const magicByte = buf.readInt8(start + 16);
  const timestampType = (attributes & TIMESTAMP_TYPE_FLAG) > 0 ? LOG_APPEND_TIME : CREATE_TIME;
  const maxTimestamp = maxTimestampBig.toString();
  const maxTimestampN = Number(maxTimestampBig);
  const context: BatchContext = {
    firstOffset: firstOffsetBig.toString(),
    firstTimestamp: firstTimestampBig.toString(),
    partitionLeaderEpoch: buf.readInt32BE(start + 12),
    inTransaction: (attributes & TRANSACTIONAL_FLAG) > 0,
    isControlBatch: (attributes & CONTROL_FLAG) > 0,
    lastOffsetDelta: buf.readInt32BE(start + 23),
    producerId: buf.readBigInt64BE(start + 43).toString(),
    producerEpoch: buf.readInt16BE(start + 51),
    firstSequence: buf.readInt32BE(start + 53),
    maxTimestamp,
    timestampType,
    magicByte,
  };
  const logAppend = timestampType === LOG_APPEND_TIME;
  const isControl = context.isControlBatch;
  const count = buf.readInt32BE(start + 57);
  if (count === -1) return [];
  if (count < 0) return NOT_PLAIN;
  const out = new Array<FetchedMessage>(count);
  let p = start + 61;
  for (let i = 0; i < count; i++) {
    // Record: length varint, attributes int8, timestampDelta varlong, offsetDelta varint,
    // key varint bytes, value varint bytes, headers varint count.
    cursor = p;
    const length = zigzag32(buf, end);
    const recordEnd = cursor + length;
    if (Number.isNaN(length) || length < 0 || recordEnd > end) return NOT_PLAIN;
    const recordAttributes = buf.readInt8(cursor++);
    const tsDelta = zigzag49(buf, recordEnd);
    const offsetDelta = zigzag32(buf, recordEnd);
    const keyStart = varSpan(buf, recordEnd);
    const keyEnd = spanEnd;
    const valueStart = varSpan(buf, recordEnd);
    const valueEnd = spanEnd;
    if (Number.isNaN(tsDelta) || Number.isNaN(offsetDelta) || keyStart === -2 || valueStart === -2)
      return NOT_PLAIN;
    p = cursor;
    // headers: only none (count 0, or -1 which kafkajs also reads as none)
    if (p >= recordEnd) return NOT_PLAIN;
    const headerCount = buf[p] as number;
    if (headerCount !== 0 && headerCount !== 1) return NOT_PLAIN;
    p = recordEnd;
    out[i] = new PlainMessage(
      magicByte,
      recordAttributes,
      logAppend ? maxTimestampN : firstTimestampN + tsDelta,
      logAppend ? maxTimestamp : undefined,
      String(firstOffsetN + offsetDelta),
      isControl,
      context,
      buf,
      keyStart,
      keyEnd,
      valueStart,
      valueEnd,
    );
  }
  return out;
}

/**
 * kafkajs's decodeMessages with the plain batches decoded here: same result, same handling of a
 * partial batch at the tail (the broker cuts the response at maxBytes), everything else by
 * kafkajs's own code.
 */
export function fastDecodeMessages(
  original: DecodeMessages,
  recordBatchDecoder: RecordBatchDecoder,
  Decoder: DecoderClass,
): DecodeMessages {
  return async (decoder) => {
    const at = decoder.offset;
    const buf = decoder.buffer;
    if (buf.length - at < 4) return original(decoder);
    const size = buf.readInt32BE(at);
    if (size <= 0 || buf.length - at - 4 < size || size <= MAGIC_OFFSET) return original(decoder);
    const begin = at + 4;
    if (buf.readInt8(begin + MAGIC_OFFSET) !== MAGIC_RECORD_BATCH) return original(decoder);
    decoder.offset = begin + size;
    const end = begin + size;
    const records: FetchedMessage[] = [];
    let p = begin;
    while (end - p >= RECORD_BATCH_OVERHEAD) {
      const length = buf.readInt32BE(p + 8);
      const batchEnd = p + 12 + length;
      // the tail can be a partial batch (kafkajs: KafkaJSPartialMessageError, ends the loop)
      if (batchEnd > end) break;
      const plain = length >= RECORD_BATCH_OVERHEAD ? decodePlainBatch(buf, p, batchEnd) : null;
      if (plain) {
        for (let i = 0; i < plain.length; i++) records.push(plain[i] as FetchedMessage);
      } else {
        const sub = new Decoder(buf.subarray(begin, end));
        sub.offset = p - begin;
        try {
          const batch = await recordBatchDecoder(sub);
          for (const r of batch.records) records.push(r);
        } catch (e) {
          if ((e as { name?: string }).name === 'KafkaJSPartialMessageError') break;
          throw e;
        }
      }
      p = length >= 0 ? batchEnd : end;
    }
    return records;
  };
}

let installed: boolean | undefined;
let kept: DecodeMessages | undefined;

/** kafkajs's own decodeMessages (the one this module replaces, when it has). */
export function kafkajsDecodeMessages(): DecodeMessages {
  return (
    kept ?? (require(kafkajsRoot() + 'src/protocol/requests/fetch/v4/decodeMessages.js') as DecodeMessages)
  );
}

/**
 * Puts the decoder in front of kafkajs's fetch record sets. True when it is in place (now or
 * before); false when kafkajs is another version or a fetch response module was already loaded
 * (it captured kafkajs's function).
 */
export function installFetchDecoder(): boolean {
  if (installed !== undefined) return installed;
  const dir = 'src/protocol/requests/fetch/';
  const root = kafkajsRoot();
  installed = replaceKafkajsModule<DecodeMessages>(
    `${dir}v4/decodeMessages.js`,
    [4, 5, 6, 7, 8, 9, 10, 11].map((v) => `${dir}v${v}/response.js`),
    (original) => {
      kept = original;
      const recordBatchDecoder = require(
        root + 'src/protocol/recordBatch/v0/decoder.js',
      ) as RecordBatchDecoder;
      const Decoder = require(root + 'src/protocol/decoder.js') as DecoderClass;
      return fastDecodeMessages(original, recordBatchDecoder, Decoder);
    },
  );
  return installed;
}
