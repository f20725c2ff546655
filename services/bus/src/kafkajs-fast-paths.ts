// Four places where kafkajs 2.2.4 spends most of a streaming engine's CPU are replaced by our own
// code, each held to kafkajs's output by its unit test: building a consumer Batch
// (kafka-batch.ts), decoding fetched record batches (kafka-fetch-decoder.ts), grouping a send's
// messages by partition (kafka-produce-grouping.ts) and encoding produce requests
// (kafka-produce-encoder.ts). Each goes into kafkajs's module cache, so this
// module must be evaluated before kafkajs is: kafka.ts imports it first. Any other kafkajs
// version, or a kafkajs loaded earlier, keeps its own code.
// KEELSON_KAFKA_FAST_PATHS=off keeps kafkajs's own code for all four.
import { installFastBatch } from './kafka-batch.ts';
import { installFetchDecoder } from './kafka-fetch-decoder.ts';
import { installProduceEncoder } from './kafka-produce-encoder.ts';
import { installProduceGrouping } from './kafka-produce-grouping.ts';

const off = process.env.KEELSON_KAFKA_FAST_PATHS === 'off';
const which = (installed: boolean) => (installed ? 'keelson' : 'kafkajs');

/** Whose code each path runs, for the startup log. */
export const kafkajsFastPaths = {
  batch: which(!off && installFastBatch()),
  fetchDecoder: which(!off && installFetchDecoder()),
  produceGrouping: which(!off && installProduceGrouping()),
  produceEncoder: which(!off && installProduceEncoder()),
};
