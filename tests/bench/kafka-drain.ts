// A bare kafkajs consumer draining a topic, in a process of its own so that nothing of Keelson
// is loaded unless asked: the kafka bench's reference for the transport's ceiling.
//   node --import tsx tests/bench/kafka-drain.ts BROKERS TOPIC TOTAL MODE
// MODE: `bare` (count the messages), `json` (also JSON.parse each value), `keelson-paths`
// (count, on Keelson's replacements of kafkajs's hot paths, kafkajs-fast-paths.ts). Prints one
// JSON line: { rate, parsed }.
export {};

const [brokers, topic, totalArg, mode] = process.argv.slice(2);
if (!brokers || !topic || !totalArg || !['bare', 'json', 'keelson-paths'].includes(mode ?? '')) {
  console.error('usage: kafka-drain.ts BROKERS TOPIC TOTAL bare|json|keelson-paths');
  process.exit(2);
}
// Before kafkajs loads, as in the engine.
if (mode === 'keelson-paths') {
  const { kafkajsFastPaths } = await import('../../services/bus/src/kafkajs-fast-paths.ts');
  if (Object.values(kafkajsFastPaths).some((w) => w !== 'keelson'))
    throw new Error(`kafka-drain: not all fast paths are in place: ${JSON.stringify(kafkajsFastPaths)}`);
}
const { default: kafkajs } = await import('kafkajs');
const total = Number(totalArg);
const kafka = new kafkajs.Kafka({
  clientId: 'keelson-bench-drain',
  brokers: brokers.split(','),
  logLevel: kafkajs.logLevel.NOTHING,
});
const consumer = kafka.consumer({
  groupId: `${topic}.drain-${mode}-${process.pid}`,
  maxWaitTimeInMs: 50,
  maxBytesPerPartition: 4 * 1024 * 1024,
});
await consumer.connect();
await consumer.subscribe({ topics: [topic], fromBeginning: true });
let n = 0;
let parsed = 0;
// From the moment the group is joined: the join itself is not the transport's throughput.
let first = 0;
consumer.on(consumer.events.GROUP_JOIN, () => (first = performance.now()));
await new Promise<void>((resolve) => {
  void consumer.run({
    partitionsConsumedConcurrently: 6,
    eachBatch: async ({ batch }) => {
      if (mode === 'json')
        for (const m of batch.messages)
          parsed += (JSON.parse(m.value!.toString()) as { price: number }).price > 0 ? 1 : 0;
      n += batch.messages.length;
      if (n >= total) resolve();
    },
  });
});
const seconds = (performance.now() - first) / 1000;
await consumer.disconnect();
console.log(JSON.stringify({ rate: total / seconds, parsed }));
process.exit(0);
