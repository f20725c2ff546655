// How an integration suite gets a real Kafka broker, in order of preference:
//  1. KAFKA_BROKERS (CI exports it after deploy/local-kafka/start; a developer may point at theirs);
//  2. a Docker engine, if one answers (testcontainers, loaded only then);
//  3. deploy/local-kafka/start, when java and mvn are on the PATH (the broker is left running for
//     the next suite; `bash deploy/local-kafka/stop` ends it);
//  4. none: the suite is skipped with a loud message, or fails when REQUIRE_KAFKA=1.
import { spawn, spawnSync } from 'node:child_process';
import { randomBytes } from 'node:crypto';
import { existsSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { KafkaSasl } from '@keelson/bus';

export interface Broker {
  brokers: string[];
  source: 'env' | 'docker' | 'local';
  sasl?: KafkaSasl;
  /** Instance directory of a local broker (for tests that stop and restart their own). */
  dir?: string;
}

const repoRoot = join(dirname(fileURLToPath(import.meta.url)), '..', '..');
const startScript = join(repoRoot, 'deploy', 'local-kafka', 'start');
const stopScript = join(repoRoot, 'deploy', 'local-kafka', 'stop');

export const requireKafka = /^(1|true|yes)$/i.test(process.env.REQUIRE_KAFKA ?? '');

function onPath(cmd: string): boolean {
  return spawnSync('sh', ['-c', `command -v ${cmd}`], { stdio: 'ignore' }).status === 0;
}

function noBroker(why: string): undefined {
  const msg = `\n*** KAFKA INTEGRATION TESTS SKIPPED: ${why}.\n*** Set KAFKA_BROKERS, or install Java 17 + Maven so deploy/local-kafka/start can run a broker.\n`;
  if (requireKafka) throw new Error(`REQUIRE_KAFKA=1 but no Kafka broker: ${why}`);
  process.stderr.write(msg);
  return undefined;
}

/** Runs deploy/local-kafka/start with args; resolves with its output, rejects with the log tail. */
export function runLocalKafka(
  script: 'start' | 'stop',
  args: string[],
  env: NodeJS.ProcessEnv = {},
): Promise<string> {
  return new Promise((resolve, reject) => {
    const child = spawn('bash', [script === 'start' ? startScript : stopScript, ...args], {
      env: { ...process.env, ...env },
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    let out = '';
    child.stdout.on('data', (d: Buffer) => (out += d.toString()));
    child.stderr.on('data', (d: Buffer) => (out += d.toString()));
    child.on('error', reject);
    child.on('close', (code) =>
      code === 0
        ? resolve(out)
        : reject(new Error(`deploy/local-kafka/${script} ${args.join(' ')} exited ${code}:\n${out}`)),
    );
  });
}

function instanceDir(mode: 'plain' | 'sasl', port: number): string {
  return join(repoRoot, 'deploy', 'local-kafka', '.run', `${mode}-${port}`);
}

async function dockerBroker(): Promise<Broker | undefined> {
  // Cheap signs first: importing testcontainers and probing a missing engine costs seconds.
  if (!process.env.DOCKER_HOST && !existsSync('/var/run/docker.sock')) return undefined;
  try {
    const { getContainerRuntimeClient } = await import('testcontainers');
    await getContainerRuntimeClient();
    const { KafkaContainer } = await import('@testcontainers/kafka');
    const container = await new KafkaContainer('confluentinc/cp-kafka:7.7.1')
      .withKraft()
      .withEnvironment({ KAFKA_AUTO_CREATE_TOPICS_ENABLE: 'false' })
      .start();
    return { brokers: [`${container.getHost()}:${container.getMappedPort(9093)}`], source: 'docker' };
  } catch (e) {
    process.stderr.write(
      `kafka test support: Docker did not give a broker (${(e as Error).message}); trying the local one\n`,
    );
    return undefined;
  }
}

let plain: Promise<Broker | undefined> | undefined;

/** The shared plain broker for this test process (started once, reused by every suite). */
export function findBroker(): Promise<Broker | undefined> {
  plain ??= (async () => {
    const env = process.env.KAFKA_BROKERS?.trim();
    if (env) return { brokers: env.split(',').map((b) => b.trim()), source: 'env' } as Broker;
    const docker = await dockerBroker();
    if (docker) return docker;
    if (!onPath('java') || !onPath('mvn'))
      return noBroker('KAFKA_BROKERS unset, no Docker engine, and java or mvn missing');
    const port = Number(process.env.KAFKA_PORT ?? 9092);
    try {
      await runLocalKafka('start', []);
    } catch (e) {
      return noBroker((e as Error).message);
    }
    return { brokers: [`127.0.0.1:${port}`], source: 'local', dir: instanceDir('plain', port) } as Broker;
  })();
  return plain;
}

function readEnvFile(path: string): Record<string, string> {
  const out: Record<string, string> = {};
  for (const line of readFileSync(path, 'utf8').split('\n')) {
    const eq = line.indexOf('=');
    if (eq > 0) out[line.slice(0, eq)] = line.slice(eq + 1);
  }
  return out;
}

/**
 * A broker that requires SASL: KAFKA_SASL_BROKERS with KAFKA_SASL_MECHANISM/USERNAME/PASSWORD if
 * set, else `deploy/local-kafka/start --sasl` (user and random password from its client.env).
 * `started` says whether this call started it, so the suite that did can stop it again.
 */
export async function findSaslBroker(): Promise<
  (Broker & { sasl: KafkaSasl; started: boolean }) | undefined
> {
  const given = process.env.KAFKA_SASL_BROKERS?.trim();
  if (given) {
    const {
      KAFKA_SASL_MECHANISM: mechanism,
      KAFKA_SASL_USERNAME: username,
      KAFKA_SASL_PASSWORD: password,
    } = process.env;
    if (!mechanism || !username || !password) {
      throw new Error(
        'KAFKA_SASL_BROKERS is set: KAFKA_SASL_MECHANISM, KAFKA_SASL_USERNAME and KAFKA_SASL_PASSWORD must be too',
      );
    }
    return {
      brokers: given.split(','),
      source: 'env',
      sasl: { mechanism: mechanism as KafkaSasl['mechanism'], username, password },
      started: false,
    };
  }
  if (!onPath('java') || !onPath('mvn'))
    return noBroker('no SASL broker: KAFKA_SASL_BROKERS unset and java or mvn missing');
  const port = Number(process.env.KAFKA_SASL_PORT ?? 9094);
  let out: string;
  try {
    out = await runLocalKafka('start', ['--sasl', '--port', String(port)]);
  } catch (e) {
    return noBroker((e as Error).message);
  }
  const dir = instanceDir('sasl', port);
  const env = readEnvFile(join(dir, 'client.env'));
  return {
    brokers: [`127.0.0.1:${port}`],
    source: 'local',
    dir,
    sasl: {
      mechanism: env.KAFKA_SASL_MECHANISM as KafkaSasl['mechanism'],
      username: env.KAFKA_SASL_USERNAME!,
      password: env.KAFKA_SASL_PASSWORD!,
    },
    started: !out.includes('already running'),
  };
}

/** A topic prefix of its own for each test, so suites sharing a broker never read each other. */
export function uniquePrefix(label = 'test'): string {
  return `keelson-${label}-${randomBytes(4).toString('hex')}.`;
}
