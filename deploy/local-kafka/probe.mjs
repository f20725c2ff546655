/* global setTimeout, clearTimeout */
// Readiness probe for `start`: the broker counts as up when kafkajs (the client Keelson uses) can
// fetch cluster metadata from it, which proves both the listener and the protocol versions.
// usage: node probe.mjs 127.0.0.1:9092 [client.env]   exit 0 ready, 1 not yet, 2 cannot probe
import { createRequire } from 'node:module';
import { readFileSync } from 'node:fs';

const [broker, credFile] = process.argv.slice(2);
let kafkajs;
try {
  kafkajs = createRequire(import.meta.url)('kafkajs');
} catch {
  process.exit(2);
}
let sasl;
if (credFile) {
  const env = Object.fromEntries(
    readFileSync(credFile, 'utf8')
      .split('\n')
      .filter((l) => l.includes('='))
      .map((l) => [l.slice(0, l.indexOf('=')), l.slice(l.indexOf('=') + 1)]),
  );
  sasl = {
    mechanism: env.KAFKA_SASL_MECHANISM,
    username: env.KAFKA_SASL_USERNAME,
    password: env.KAFKA_SASL_PASSWORD,
  };
}
const kafka = new kafkajs.Kafka({
  clientId: 'local-kafka-probe',
  brokers: [broker],
  sasl,
  connectionTimeout: 2000,
  requestTimeout: 4000,
  retry: { retries: 0 },
  logLevel: kafkajs.logLevel.NOTHING,
});
const admin = kafka.admin();
const timer = setTimeout(() => process.exit(1), 8000);
try {
  await admin.connect();
  await admin.describeCluster();
  await admin.listTopics();
  await admin.disconnect();
  clearTimeout(timer);
  process.exit(0);
} catch {
  process.exit(1);
}
