// Where the Kafka connection settings come from: explicit options first, then the environment.
// Credentials are only ever read from configuration (env or a file the env names), never written
// in code, and `describeKafkaConfig` is the only form in which a config may be logged.
import { readFileSync } from 'node:fs';
import type { ConnectionOptions } from 'node:tls';

export type SaslMechanism = 'plain' | 'scram-sha-256' | 'scram-sha-512';

export interface KafkaSasl {
  mechanism: SaslMechanism;
  username: string;
  password: string;
}

export interface KafkaConnection {
  brokers: string[];
  clientId: string;
  /** false, true (system CAs), or node TLS options (ca, cert, key, servername, ...). */
  ssl: boolean | ConnectionOptions;
  sasl?: KafkaSasl | undefined;
}

export class KafkaConfigError extends Error {
  override name = 'KafkaConfigError';
}

const MECHANISMS: readonly SaslMechanism[] = ['plain', 'scram-sha-256', 'scram-sha-512'];

/** `host:port,host:port` -> list, each entry checked so a typo fails here and not in a retry loop. */
export function parseBrokers(list: string, field = 'brokers'): string[] {
  const brokers = list
    .split(',')
    .map((b) => b.trim())
    .filter((b) => b !== '');
  if (brokers.length === 0) throw new KafkaConfigError(`${field} must list at least one host:port`);
  for (const b of brokers) {
    const m = /^(\[[0-9a-fA-F:]+\]|[^\s:/[\]]+):(\d{1,5})$/.exec(b);
    const port = m ? Number(m[2]) : 0;
    if (!m || port < 1 || port > 65535) {
      throw new KafkaConfigError(`${field} entry ${JSON.stringify(b)} must be host:port with port 1..65535`);
    }
  }
  return brokers;
}

function flag(env: NodeJS.ProcessEnv, name: string): boolean | undefined {
  const v = env[name];
  if (v === undefined || v === '') return undefined;
  if (/^(1|true|yes|on)$/i.test(v)) return true;
  if (/^(0|false|no|off)$/i.test(v)) return false;
  throw new KafkaConfigError(`${name} must be 1/true/yes/on or 0/false/no/off, got ${JSON.stringify(v)}`);
}

function readSecretFile(path: string, name: string): string {
  try {
    return readFileSync(path, 'utf8').replace(/\r?\n$/, '');
  } catch (e) {
    throw new KafkaConfigError(`${name}: cannot read ${path}: ${(e as Error).message}`);
  }
}

/**
 * TLS and SASL from the environment:
 * KAFKA_SSL=1, KAFKA_SSL_CA_FILE, KAFKA_SSL_CERT_FILE, KAFKA_SSL_KEY_FILE,
 * KAFKA_SSL_REJECT_UNAUTHORIZED (default true); KAFKA_SASL_MECHANISM (plain|scram-sha-256|
 * scram-sha-512), KAFKA_SASL_USERNAME, KAFKA_SASL_PASSWORD or KAFKA_SASL_PASSWORD_FILE.
 */
export function securityFromEnv(env: NodeJS.ProcessEnv = process.env): Pick<KafkaConnection, 'ssl' | 'sasl'> {
  let ssl: boolean | ConnectionOptions = flag(env, 'KAFKA_SSL') ?? false;
  const files = {
    ca: env.KAFKA_SSL_CA_FILE,
    cert: env.KAFKA_SSL_CERT_FILE,
    key: env.KAFKA_SSL_KEY_FILE,
  };
  const reject = flag(env, 'KAFKA_SSL_REJECT_UNAUTHORIZED');
  if (files.ca || files.cert || files.key || reject !== undefined) {
    if (ssl === false && flag(env, 'KAFKA_SSL') === false) {
      throw new KafkaConfigError('KAFKA_SSL=0 contradicts the KAFKA_SSL_* files that are set');
    }
    const opts: ConnectionOptions = {};
    if (files.ca) opts.ca = readSecretFile(files.ca, 'KAFKA_SSL_CA_FILE');
    if (files.cert) opts.cert = readSecretFile(files.cert, 'KAFKA_SSL_CERT_FILE');
    if (files.key) opts.key = readSecretFile(files.key, 'KAFKA_SSL_KEY_FILE');
    if (reject !== undefined) opts.rejectUnauthorized = reject;
    ssl = opts;
  }

  const mechanism = env.KAFKA_SASL_MECHANISM?.trim().toLowerCase();
  if (!mechanism) {
    if (env.KAFKA_SASL_USERNAME || env.KAFKA_SASL_PASSWORD || env.KAFKA_SASL_PASSWORD_FILE) {
      throw new KafkaConfigError('KAFKA_SASL_MECHANISM must be set when KAFKA_SASL_USERNAME/PASSWORD are');
    }
    return { ssl };
  }
  if (!(MECHANISMS as readonly string[]).includes(mechanism)) {
    throw new KafkaConfigError(
      `KAFKA_SASL_MECHANISM must be one of ${MECHANISMS.join(', ')}, got ${JSON.stringify(mechanism)}`,
    );
  }
  const username = env.KAFKA_SASL_USERNAME;
  if (!username) throw new KafkaConfigError('KAFKA_SASL_USERNAME must be set with KAFKA_SASL_MECHANISM');
  let password = env.KAFKA_SASL_PASSWORD;
  if (env.KAFKA_SASL_PASSWORD_FILE) {
    if (password) throw new KafkaConfigError('set KAFKA_SASL_PASSWORD or KAFKA_SASL_PASSWORD_FILE, not both');
    password = readSecretFile(env.KAFKA_SASL_PASSWORD_FILE, 'KAFKA_SASL_PASSWORD_FILE');
  }
  if (!password)
    throw new KafkaConfigError(
      'KAFKA_SASL_PASSWORD or KAFKA_SASL_PASSWORD_FILE must be set with KAFKA_SASL_MECHANISM',
    );
  return { ssl, sasl: { mechanism: mechanism as SaslMechanism, username, password } };
}

/** A connection from explicit values where given, the environment for the rest. */
export function resolveConnection(
  given: {
    brokers?: string | string[] | undefined;
    clientId?: string | undefined;
    ssl?: KafkaConnection['ssl'] | undefined;
    sasl?: KafkaSasl | undefined;
  },
  env: NodeJS.ProcessEnv = process.env,
): KafkaConnection {
  const brokerList = given.brokers ?? env.KAFKA_BROKERS;
  if (brokerList === undefined || brokerList.length === 0) {
    throw new KafkaConfigError('no brokers: pass --brokers host:port[,host:port] or set KAFKA_BROKERS');
  }
  const brokers = Array.isArray(brokerList)
    ? brokerList.flatMap((b) => parseBrokers(b))
    : parseBrokers(brokerList, given.brokers !== undefined ? 'brokers' : 'KAFKA_BROKERS');
  const fromEnv = securityFromEnv(env);
  if (given.sasl && !MECHANISMS.includes(given.sasl.mechanism)) {
    throw new KafkaConfigError(`sasl.mechanism must be one of ${MECHANISMS.join(', ')}`);
  }
  return {
    brokers,
    clientId: given.clientId ?? env.KAFKA_CLIENT_ID ?? 'keelson',
    ssl: given.ssl ?? fromEnv.ssl,
    sasl: given.sasl ?? fromEnv.sasl,
  };
}

/** The loggable form of a connection: who and where, never a password or a key. */
export function describeKafkaConfig(c: KafkaConnection): Record<string, unknown> {
  return {
    brokers: c.brokers,
    clientId: c.clientId,
    tls: c.ssl === false ? false : c.ssl === true ? 'system CAs' : 'configured',
    sasl: c.sasl ? { mechanism: c.sasl.mechanism, username: c.sasl.username } : false,
  };
}
