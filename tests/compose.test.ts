// The deployment files checked against each other and against the code: docker-compose.yml's
// services and wiring, the Prometheus scrape targets, the Grafana provisioning, and every metric
// named by a dashboard query or an alert rule against the metrics KeelsonMetrics really registers.
// There is no Docker engine on the build machines, so this is static; the shapes it checks are the
// Compose specification's (compose-spec.io) and Grafana's provisioning format.
import { existsSync, readFileSync, readdirSync } from 'node:fs';
import { join, posix } from 'node:path';
import { KeelsonMetrics } from '@keelson/http';
import { beforeAll, describe, expect, it } from 'vitest';
import { parse } from 'yaml';

const root = join(import.meta.dirname, '..');
const read = (p: string) => readFileSync(join(root, p), 'utf8');
const yml = <T>(p: string) => parse(read(p)) as T;

interface Service {
  image?: string;
  build?: { context: string; dockerfile: string };
  command?: string[];
  environment?: Record<string, string>;
  ports?: string[];
  volumes?: string[];
  depends_on?: Record<string, { condition: string }>;
  healthcheck?: { test: string[] };
  restart?: string;
}
const compose = yml<{ services: Record<string, Service> }>('docker-compose.yml');
const services = compose.services;
const keelsonServices = Object.entries(services).filter(
  ([, s]) => s.build?.dockerfile === 'deploy/Dockerfile',
);
const longRunning = keelsonServices.filter(([, s]) => s.restart !== 'no');

function flag(cmd: string[] | undefined, name: string): string | undefined {
  const i = (cmd ?? []).indexOf(name);
  return i >= 0 ? cmd?.[i + 1] : undefined;
}

/** Mount list "host:container[:mode]" -> { host, container }. */
function mounts(s: Service): { host: string; container: string }[] {
  return (s.volumes ?? []).map((v) => {
    const [host = '', container = ''] = v.split(':');
    return { host, container };
  });
}

/** Map a path inside a container to the repository file mounted there, or undefined. */
function hostPathOf(s: Service, containerPath: string): string | undefined {
  for (const m of mounts(s)) {
    if (!m.host.startsWith('./')) continue;
    if (containerPath === m.container || containerPath.startsWith(`${m.container}/`)) {
      return posix.join(m.host.slice(2), containerPath.slice(m.container.length));
    }
  }
  return undefined;
}

describe('docker-compose.yml: services', () => {
  it('runs the broker, the topic creator, engine, aggregate stage, board, simulator, Prometheus and Grafana', () => {
    expect(Object.keys(services).sort()).toEqual(
      ['aggregator', 'board', 'engine', 'grafana', 'kafka', 'prometheus', 'sim', 'topics'].sort(),
    );
    expect(services.kafka?.image).toMatch(/^apache\/kafka:3\./); // Kafka 3.x: kafkajs 2.2.4 needs the old protocol versions
    expect(services.kafka?.environment?.KAFKA_PROCESS_ROLES).toBe('broker,controller'); // KRaft, one node
    expect(services.prometheus?.image).toMatch(/^prom\/prometheus:/);
    expect(services.grafana?.image).toMatch(/^grafana\/grafana:/);
  });

  it('builds every Keelson service from deploy/Dockerfile and runs the right keelson command', () => {
    expect(keelsonServices.map(([n]) => n).sort()).toEqual([
      'aggregator',
      'board',
      'engine',
      'sim',
      'topics',
    ]);
    expect(services.topics?.command?.[0]).toBe('topics');
    expect(services.engine?.command?.slice(0, 3)).toEqual(['run', '--role', 'engine']);
    expect(services.aggregator?.command?.slice(0, 3)).toEqual(['run', '--role', 'aggregate']);
    expect(services.board?.command?.[0]).toBe('board');
    expect(services.sim?.command?.[0]).toBe('sim');
    const images = new Set(keelsonServices.map(([, s]) => s.image));
    expect(images.size).toBe(1); // one image, built once
  });

  it('points every KAFKA_BROKERS and --brokers at the broker service on its advertised internal listener', () => {
    const advertised = services.kafka?.environment?.KAFKA_ADVERTISED_LISTENERS ?? '';
    const internal = advertised
      .split(',')
      .map((l) => /^(\w+):\/\/([^:]+):(\d+)$/.exec(l))
      .find((m) => m?.[2] === 'kafka');
    expect(internal, 'an advertised listener named by the service host "kafka"').toBeTruthy();
    const expected = `kafka:${internal?.[3]}`;
    let seen = 0;
    for (const [name, s] of Object.entries(services)) {
      for (const list of [s.environment?.KAFKA_BROKERS, flag(s.command, '--brokers')]) {
        if (list === undefined) continue;
        seen++;
        for (const b of list.split(',')) expect(b, `${name}`).toBe(expected);
      }
    }
    for (const [name, s] of keelsonServices) expect(s.environment?.KAFKA_BROKERS, name).toBe(expected);
    expect(seen).toBeGreaterThanOrEqual(keelsonServices.length);
  });

  it('gives every long-running Keelson service a /healthz healthcheck on the port it serves', () => {
    expect(longRunning.length).toBe(4);
    for (const [name, s] of longRunning) {
      const port = flag(s.command, '--port');
      expect(port, `${name} --port`).toBe('9400');
      expect(flag(s.command, '--host'), `${name} listens beyond loopback inside its container`).toBe(
        '0.0.0.0',
      );
      const test = (s.healthcheck?.test ?? []).join(' ');
      expect(test, name).toContain(`http://127.0.0.1:${port}/healthz`);
    }
  });

  it('orders start-up: broker healthy, then topics created, then the services', () => {
    expect(services.topics?.depends_on?.kafka?.condition).toBe('service_healthy');
    expect(services.kafka?.healthcheck?.test.join(' ')).toContain('kafka-broker-api-versions');
    for (const [name, s] of longRunning) {
      expect(s.depends_on?.topics?.condition, name).toBe('service_completed_successfully');
    }
    expect(services.grafana?.depends_on?.prometheus?.condition).toBe('service_healthy');
  });

  it('publishes host ports on loopback only and never the same one twice', () => {
    const host = Object.values(services).flatMap((s) => s.ports ?? []);
    for (const p of host) expect(p).toMatch(/^127\.0\.0\.1:\d+:\d+$/);
    const hostPorts = host.map((p) => p.split(':')[1]);
    expect(new Set(hostPorts).size).toBe(hostPorts.length);
  });
});

describe('docker-compose.yml: Prometheus', () => {
  const prom = services.prometheus as Service;
  const configInContainer =
    (prom.command ?? []).find((c) => c.startsWith('--config.file='))?.split('=')[1] ?? '';
  const configFile = hostPathOf(prom, configInContainer);

  it('mounts the repository config and rules where --config.file points', () => {
    expect(configFile).toBe('deploy/prometheus/prometheus.yml');
    expect(existsSync(join(root, configFile ?? 'missing'))).toBe(true);
  });

  it('loads the rule files through the mount', () => {
    const cfg = yml<{ rule_files: string[] }>(configFile ?? '');
    const configDir = posix.dirname(configInContainer);
    const found = cfg.rule_files.flatMap((pattern) => {
      const inContainer = posix.isAbsolute(pattern) ? pattern : posix.join(configDir, pattern);
      const onHost = hostPathOf(prom, posix.dirname(inContainer));
      if (!onHost) return [];
      const re = new RegExp(`^${posix.basename(inContainer).replace(/\./g, '\\.').replace(/\*/g, '.*')}$`);
      return readdirSync(join(root, onHost))
        .filter((f) => re.test(f))
        .map((f) => posix.join(onHost, f));
    });
    expect(found).toContain('deploy/prometheus/rules/keelson.rules.yml');
  });

  it('scrapes engine, aggregator and board by service name on the port they serve', () => {
    const cfg = yml<{
      scrape_configs: { job_name: string; metrics_path?: string; static_configs: { targets: string[] }[] }[];
    }>(configFile ?? '');
    const keelsonJobs = cfg.scrape_configs.filter((j) => j.job_name.startsWith('keelson-'));
    const targets = keelsonJobs.flatMap((j) => j.static_configs.flatMap((c) => c.targets));
    expect(targets.sort()).toEqual(['aggregator:9400', 'board:9400', 'engine:9400']);
    for (const t of targets) {
      const [svc = '', port] = t.split(':');
      expect(services[svc], t).toBeDefined();
      expect(flag(services[svc]?.command, '--port'), t).toBe(port);
    }
    for (const j of keelsonJobs) expect(j.metrics_path ?? '/metrics').toBe('/metrics');
  });
});

describe('docker-compose.yml: the dashboard server', () => {
  const grafana = services.grafana as Service;
  const provisioning = hostPathOf(grafana, '/etc/grafana/provisioning');

  it('mounts the provisioning directory with a Prometheus datasource on the compose Prometheus', () => {
    expect(provisioning).toBe('deploy/dashboard/provisioning');
    const ds = yml<{ datasources: { uid: string; type: string; url: string }[] }>(
      `${provisioning}/datasources/prometheus.yml`,
    );
    expect(ds.datasources[0]?.type).toBe('prometheus');
    expect(ds.datasources[0]?.url).toBe('http://prometheus:9090');
  });

  it('mounts the dashboards where the provider reads them, and the dashboard uses the provisioned datasource', () => {
    const prov = yml<{ providers: { options: { path: string } }[] }>(
      `${provisioning}/dashboards/keelson.yml`,
    );
    const dashDir = hostPathOf(grafana, prov.providers[0]?.options.path ?? '');
    expect(dashDir).toBe('deploy/dashboard/dashboards');
    const uid = yml<{ datasources: { uid: string }[] }>(`${provisioning}/datasources/prometheus.yml`)
      .datasources[0]?.uid;
    for (const p of dashboardPanels()) expect(p.datasource?.uid, p.title).toBe(uid);
  });
});

// ---- every query names metrics that exist ----

interface Panel {
  type: string;
  title: string;
  datasource?: { uid: string };
  targets?: { expr: string }[];
}
function dashboardPanels(): Panel[] {
  const dir = join(root, 'deploy/dashboard/dashboards');
  return readdirSync(dir)
    .filter((f) => f.endsWith('.json'))
    .flatMap((f) => (JSON.parse(readFileSync(join(dir, f), 'utf8')) as { panels: Panel[] }).panels)
    .filter((p) => p.type !== 'row');
}

/** Metric names in a PromQL expression: identifiers outside string literals that are not
 *  functions, keywords, label names (inside braces) or durations. Good enough for our own rules. */
function metricNames(expr: string): string[] {
  const noStrings = expr.replace(/"(?:[^"\\]|\\.)*"/g, '""').replace(/'(?:[^'\\]|\\.)*'/g, "''");
  const noMatchers = noStrings.replace(/\{[^}]*\}/g, '{}');
  const noGrouping = noMatchers.replace(/\b(by|without|on|ignoring|group_left|group_right)\s*\([^)]*\)/g, '');
  const noRanges = noGrouping.replace(/\[[^\]]*\]/g, '[]');
  const names: string[] = [];
  for (const m of noRanges.matchAll(/[a-zA-Z_:][a-zA-Z0-9_:]*/g)) {
    const rest = noRanges.slice((m.index ?? 0) + m[0].length).trimStart();
    if (!PROMQL_WORDS.has(m[0]) && !rest.startsWith('(')) names.push(m[0]); // "name(" is a function call
  }
  return names;
}
const PROMQL_WORDS = new Set([
  'and',
  'or',
  'unless',
  'by',
  'without',
  'on',
  'ignoring',
  'group_left',
  'group_right',
  'bool',
  'offset',
]);

let defined: Set<string>;
beforeAll(async () => {
  const m = new KeelsonMetrics();
  defined = new Set();
  for (const fam of await m.registry.getMetricsAsJSON()) {
    defined.add(fam.name);
    if (String(fam.type) === 'histogram')
      for (const s of ['_bucket', '_sum', '_count']) defined.add(fam.name + s);
  }
});
// Series that Prometheus itself attaches to every scrape.
const PROMETHEUS_SERIES = new Set(['up', 'scrape_duration_seconds', 'scrape_samples_scraped']);

describe('queries use metrics the registry defines', () => {
  it('finds metric names in PromQL (self-check of the extractor)', () => {
    expect(
      metricNames('histogram_quantile(0.99, sum by (le, job) (rate(keelson_x_bucket{a="b c"}[5m]))) > 0.25'),
    ).toEqual(['keelson_x_bucket']);
    expect(metricNames('sum(a) / sum by (t) (b{outcome="x"}) and c > 1')).toEqual(['a', 'b', 'c']);
  });

  it('every dashboard panel queries defined metrics', () => {
    const panels = dashboardPanels();
    expect(panels.length).toBeGreaterThan(10);
    for (const p of panels) {
      expect(p.targets?.length, p.title).toBeGreaterThan(0);
      for (const t of p.targets ?? []) {
        const names = metricNames(t.expr);
        expect(names.length, `${p.title}: ${t.expr}`).toBeGreaterThan(0);
        for (const n of names)
          expect(defined.has(n) || PROMETHEUS_SERIES.has(n), `${p.title}: ${n}`).toBe(true);
      }
    }
  });

  it('the dashboard shows lag per topic and partition, staleness per underlying, latency percentiles, throughput, rejects and open breaches', () => {
    const exprs = dashboardPanels().flatMap((p) => (p.targets ?? []).map((t) => t.expr));
    const has = (re: RegExp) => exprs.some((e) => re.test(e));
    expect(has(/by \(topic, partition\) \(keelson_consumer_lag_messages\)/)).toBe(true);
    expect(has(/by \(underlying\) \(keelson_feed_staleness_seconds\)/)).toBe(true);
    for (const q of ['0.5', '0.9', '0.99'])
      expect(has(new RegExp(`histogram_quantile\\(${q}, .*keelson_tick_to_publish_seconds_bucket`))).toBe(
        true,
      );
    expect(has(/rate\(keelson_inputs_total\{outcome="accepted"\}/)).toBe(true);
    expect(has(/rate\(keelson_inputs_total\{outcome="rejected"\}/)).toBe(true);
    expect(has(/keelson_open_alerts\{severity="breach"\}/)).toBe(true);
  });

  it('every alert rule expression uses defined metrics', () => {
    const rules = yml<{ groups: { rules: { alert?: string; expr: string }[] }[] }>(
      'deploy/prometheus/rules/keelson.rules.yml',
    );
    const all = rules.groups.flatMap((g) => g.rules);
    expect(all.length).toBeGreaterThan(5);
    for (const r of all) {
      const names = metricNames(r.expr);
      expect(names.length, r.alert).toBeGreaterThan(0);
      for (const n of names)
        expect(defined.has(n) || PROMETHEUS_SERIES.has(n), `${r.alert}: ${n}`).toBe(true);
    }
  });
});

describe('deploy/Dockerfile', () => {
  const dockerfile = read('deploy/Dockerfile');

  it('is node 20, installs with npm ci, and enters through npx keelson', () => {
    expect(dockerfile).toMatch(/^FROM node:20[-\w.]*$/m);
    expect(dockerfile).toMatch(/^RUN npm ci\b/m);
    expect(dockerfile).toMatch(/^ENTRYPOINT \["npx", "keelson"\]$/m);
    expect(dockerfile).toMatch(/^EXPOSE 9400$/m);
  });

  it('copies the manifest of every workspace before npm ci (so npm ci links them all)', () => {
    const workspaces = (JSON.parse(read('package.json')) as { workspaces: string[] }).workspaces;
    const dirs = workspaces.flatMap((w) =>
      w.endsWith('/*')
        ? readdirSync(join(root, w.slice(0, -2)), { withFileTypes: true })
            .filter((d) => d.isDirectory() && existsSync(join(root, w.slice(0, -2), d.name, 'package.json')))
            .map((d) => `${w.slice(0, -2)}/${d.name}`)
        : [w],
    );
    expect(dirs.length).toBeGreaterThan(5);
    const beforeInstall = dockerfile.slice(0, dockerfile.indexOf('RUN npm ci'));
    for (const d of dirs) expect(beforeInstall, d).toContain(`COPY ${d}/package.json ${d}/`);
  });
});
