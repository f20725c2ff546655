import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { describeKafkaConfig, parseBrokers, resolveConnection, securityFromEnv } from './kafka-config.ts';
import { topicPlan } from './kafka-topics.ts';

describe('parseBrokers', () => {
  it('accepts host:port lists with spaces and IPv6 literals', () => {
    expect(parseBrokers(' a.example:9092, 10.0.0.1:19092 ,[::1]:9093')).toEqual([
      'a.example:9092',
      '10.0.0.1:19092',
      '[::1]:9093',
    ]);
  });
  it.each(['', 'host', 'host:0', 'host:70000', 'host:abc', 'http://host:9092'])(
    'rejects %j naming the field',
    (raw) => {
      expect(() => parseBrokers(raw, 'KAFKA_BROKERS')).toThrow(/KAFKA_BROKERS/);
    },
  );
});

describe('securityFromEnv', () => {
  it('is plaintext without SASL when nothing is set', () => {
    expect(securityFromEnv({})).toEqual({ ssl: false });
  });
  it('reads SASL SCRAM from the environment, mechanism case-insensitive', () => {
    expect(
      securityFromEnv({
        KAFKA_SASL_MECHANISM: 'SCRAM-SHA-512',
        KAFKA_SASL_USERNAME: 'u',
        KAFKA_SASL_PASSWORD: 'p',
      }),
    ).toEqual({
      ssl: false,
      sasl: { mechanism: 'scram-sha-512', username: 'u', password: 'p' },
    });
  });
  it('reads the password from a file, without its trailing newline', () => {
    const dir = mkdtempSync(join(tmpdir(), 'keelson-kafka-'));
    writeFileSync(join(dir, 'pw'), 's3cret\n');
    const got = securityFromEnv({
      KAFKA_SASL_MECHANISM: 'plain',
      KAFKA_SASL_USERNAME: 'u',
      KAFKA_SASL_PASSWORD_FILE: join(dir, 'pw'),
    });
    expect(got.sasl?.password).toBe('s3cret');
  });
  it('names the missing or wrong variable', () => {
    expect(() => securityFromEnv({ KAFKA_SASL_USERNAME: 'u' })).toThrow(/KAFKA_SASL_MECHANISM/);
    expect(() =>
      securityFromEnv({ KAFKA_SASL_MECHANISM: 'gssapi', KAFKA_SASL_USERNAME: 'u', KAFKA_SASL_PASSWORD: 'p' }),
    ).toThrow(/KAFKA_SASL_MECHANISM must be one of/);
    expect(() => securityFromEnv({ KAFKA_SASL_MECHANISM: 'plain', KAFKA_SASL_PASSWORD: 'p' })).toThrow(
      /KAFKA_SASL_USERNAME/,
    );
    expect(() => securityFromEnv({ KAFKA_SASL_MECHANISM: 'plain', KAFKA_SASL_USERNAME: 'u' })).toThrow(
      /KAFKA_SASL_PASSWORD/,
    );
    expect(() => securityFromEnv({ KAFKA_SSL: 'maybe' })).toThrow(/KAFKA_SSL must be/);
    expect(() => securityFromEnv({ KAFKA_SSL_CA_FILE: '/nonexistent/ca.pem' })).toThrow(
      /KAFKA_SSL_CA_FILE: cannot read/,
    );
  });
  it('turns TLS on with a CA file', () => {
    const dir = mkdtempSync(join(tmpdir(), 'keelson-kafka-'));
    writeFileSync(join(dir, 'ca.pem'), 'PEM');
    expect(securityFromEnv({ KAFKA_SSL_CA_FILE: join(dir, 'ca.pem') })).toEqual({ ssl: { ca: 'PEM' } });
    expect(securityFromEnv({ KAFKA_SSL: 'true' })).toEqual({ ssl: true });
  });
});

describe('resolveConnection and describeKafkaConfig', () => {
  it('prefers explicit values and falls back to the environment', () => {
    const c = resolveConnection({}, { KAFKA_BROKERS: 'k1:9092,k2:9092', KAFKA_CLIENT_ID: 'desk-a' });
    expect(c).toMatchObject({ brokers: ['k1:9092', 'k2:9092'], clientId: 'desk-a', ssl: false });
    expect(resolveConnection({ brokers: 'x:1' }, { KAFKA_BROKERS: 'k1:9092' }).brokers).toEqual(['x:1']);
    expect(() => resolveConnection({}, {})).toThrow(/--brokers .*KAFKA_BROKERS/);
  });
  it('never shows a password in the loggable form', () => {
    const c = resolveConnection(
      {},
      {
        KAFKA_BROKERS: 'k:1',
        KAFKA_SASL_MECHANISM: 'plain',
        KAFKA_SASL_USERNAME: 'risk',
        KAFKA_SASL_PASSWORD: 'hunter2-xyz',
      },
    );
    const shown = JSON.stringify(describeKafkaConfig(c));
    expect(shown).toContain('risk');
    expect(shown).not.toContain('hunter2-xyz');
  });
});

describe('topicPlan', () => {
  it('gives the co-partitioned inputs one partition count and keeps state topics compacted', () => {
    const plan = topicPlan({ partitions: 12 });
    const co = plan.filter((t) => t.coPartitioned);
    expect(co.map((t) => t.name).sort()).toEqual(['refdata', 'spots', 'trades', 'vols']);
    expect(new Set(co.map((t) => t.partitions))).toEqual(new Set([12]));
    const compacted = plan
      .filter((t) => t.configs['cleanup.policy'] === 'compact')
      .map((t) => t.name)
      .sort();
    expect(compacted).toEqual(['curves', 'exposures', 'limits', 'partials', 'refdata', 'spots', 'vols']);
    expect(plan.find((t) => t.name === 'trades')?.configs['retention.ms']).toBe('-1');
    expect(() => topicPlan({ partitions: 0 })).toThrow(/partitions/);
  });
});
