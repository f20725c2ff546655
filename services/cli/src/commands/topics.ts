// `keelson topics`: creates Keelson's topics on a cluster, idempotently, and says what it found.
import { parseArgs } from 'node:util';
import type { CommandIo } from '../main.ts';
import { numberOption } from '../options.ts';

const HELP = `usage: keelson topics [options]

Creates every Keelson topic that is missing (inputs refdata, spots, vols, curves, trades, limits;
outputs exposures, alerts, rejected; internal partials) and checks the ones that exist. Safe to
run again: existing topics are reported, never altered.

options:
  --brokers LIST            host:port,... (default: KAFKA_BROKERS)
  --topic-prefix P          physical name = P + logical name (default: KAFKA_TOPIC_PREFIX, else 'keelson.')
  --partitions N            partitions of the keyed inputs and outputs (default 6)
  --replication-factor R    replicas of a new topic (default: the broker's default)
  --retention-days D        retention of alerts and rejected (default 7)
  --json                    print the report as JSON
  -h, --help

TLS and SASL come from the environment: KAFKA_SSL, KAFKA_SSL_CA_FILE, KAFKA_SASL_MECHANISM,
KAFKA_SASL_USERNAME, KAFKA_SASL_PASSWORD or KAFKA_SASL_PASSWORD_FILE.
Exit status: 0 all topics fit the plan, 1 a usage or connection error, 2 a topic exists with a
shape that breaks correctness (cleanup policy, or co-partitioned inputs of unequal size).
`;

function intOption(name: string, raw: string | undefined, min: number): number | undefined {
  return numberOption(name, raw, { min, integer: true });
}

export async function run(argv: string[], io: CommandIo): Promise<number> {
  let values;
  try {
    ({ values } = parseArgs({
      args: argv,
      strict: true,
      allowPositionals: false,
      options: {
        brokers: { type: 'string' },
        'topic-prefix': { type: 'string' },
        partitions: { type: 'string' },
        'replication-factor': { type: 'string' },
        'retention-days': { type: 'string' },
        json: { type: 'boolean' },
        help: { type: 'boolean', short: 'h' },
      },
    }));
  } catch (e) {
    io.stderr.write(`keelson topics: ${(e as Error).message}\n\n${HELP}`);
    return 1;
  }
  if (values.help) {
    io.stdout.write(HELP);
    return 0;
  }

  const { KafkaBus, topicPlan, ensureTopics } = await import('@keelson/bus');
  let bus;
  let plan;
  let replicationFactor;
  try {
    const partitions = intOption('partitions', values.partitions, 1);
    replicationFactor = intOption('replication-factor', values['replication-factor'], 1);
    const retentionDays = numberOption('retention-days', values['retention-days'], { min: 0, strict: true });
    plan = topicPlan({
      ...(partitions !== undefined ? { partitions } : {}),
      ...(retentionDays !== undefined ? { retentionDays } : {}),
    });
    bus = new KafkaBus({
      ...(values.brokers !== undefined ? { brokers: values.brokers } : {}),
      ...(values['topic-prefix'] !== undefined ? { topicPrefix: values['topic-prefix'] } : {}),
      clientId: 'keelson-topics',
    });
  } catch (e) {
    io.stderr.write(`keelson topics: ${(e as Error).message}\n`);
    return 1;
  }

  const admin = bus.admin();
  try {
    await admin.connect();
    const reports = await ensureTopics(
      admin,
      bus.topicPrefix,
      plan,
      replicationFactor !== undefined ? { replicationFactor } : {},
    );
    const broken = reports.some((r) => r.problems.length > 0);
    if (values.json) {
      io.stdout.write(
        JSON.stringify(
          { brokers: bus.connection.brokers, prefix: bus.topicPrefix, topics: reports },
          null,
          2,
        ) + '\n',
      );
    } else {
      const width = Math.max(...reports.map((r) => r.topic.length));
      for (const r of reports) {
        const policy = r.configs['cleanup.policy'] ?? '?';
        io.stdout.write(
          `${r.status.padEnd(8)} ${r.topic.padEnd(width)}  partitions=${r.partitions}  cleanup.policy=${policy}\n`,
        );
        for (const n of r.notes) io.stdout.write(`         note: ${n}\n`);
        for (const p of r.problems) io.stdout.write(`         PROBLEM: ${p}\n`);
      }
      const created = reports.filter((r) => r.status === 'created').length;
      io.stdout.write(
        `${created} created, ${reports.length - created} already there, on ${bus.connection.brokers.join(',')}\n`,
      );
    }
    return broken ? 2 : 0;
  } catch (e) {
    io.stderr.write(
      `keelson topics: ${(e as Error).message} (brokers ${bus.connection.brokers.join(',')})\n`,
    );
    return 1;
  } finally {
    await admin.disconnect().catch(() => undefined);
  }
}
