// The Prometheus configuration, the alert rules and their unit tests, checked by the real promtool
// (Debian's `prometheus` package). Without promtool the suite skips loudly on a workstation and
// fails under CI, where .ci/run installs it.
import { spawnSync } from 'node:child_process';
import { readFileSync, readdirSync } from 'node:fs';
import { join } from 'node:path';
import { KeelsonMetrics } from '@keelson/http';
import { describe, expect, it } from 'vitest';
import { parse } from 'yaml';

const root = join(import.meta.dirname, '..');
const promDir = join(root, 'deploy/prometheus');
const rulesFile = join(promDir, 'rules/keelson.rules.yml');
const testFiles = readdirSync(join(promDir, 'tests'))
  .filter((f) => f.endsWith('.yml'))
  .map((f) => join(promDir, 'tests', f));

function findPromtool(): string | undefined {
  const r = spawnSync('promtool', ['--version'], { encoding: 'utf8' });
  return r.status === 0 ? 'promtool' : undefined;
}
const promtool = findPromtool();
if (!promtool) {
  const msg = 'promtool not found (Debian: apt-get install prometheus): the promtool checks are SKIPPED';
  if (process.env.CI) throw new Error(`${msg.split(':')[0]}; CI is set, so this is a failure`);
  console.warn(`\n*** ${msg} ***\n`);
}

function run(...args: string[]): { status: number | null; out: string } {
  return runWith(undefined, ...args);
}
function runWith(input: string | undefined, ...args: string[]): { status: number | null; out: string } {
  const r = spawnSync(promtool ?? 'promtool', args, { cwd: root, encoding: 'utf8', input });
  return { status: r.status, out: `${r.stdout}${r.stderr}` };
}

describe.skipIf(!promtool)('promtool', () => {
  it('accepts the scrape configuration (and the rule files it loads)', () => {
    const r = run('check', 'config', 'deploy/prometheus/prometheus.yml');
    expect(r.out).toContain('SUCCESS');
    expect(r.status, r.out).toBe(0);
  });

  it('accepts the alert rules', () => {
    const r = run('check', 'rules', 'deploy/prometheus/rules/keelson.rules.yml');
    expect(r.status, r.out).toBe(0);
  });

  it('passes the rule unit tests', () => {
    expect(testFiles.length).toBeGreaterThan(0);
    const r = run('test', 'rules', ...testFiles);
    expect(r.out).not.toContain('FAILED');
    expect(r.status, r.out).toBe(0);
  });

  it('lints our /metrics exposition clean (promtool check metrics: naming, suffixes, HELP)', async () => {
    const m = new KeelsonMetrics({ now: () => 10_000 });
    m.observer.input?.('spot', 'accepted');
    m.observer.alert?.({ limitId: 'L-1', severity: 'breach', state: 'raised' });
    m.tickToPublish(0, 12);
    m.consumerLag('spots', 0, 3);
    m.bindEngine({
      stats: () => ({ positions: 1, unpriced: { 'no-vol': 1 } }),
      feeds: () => [{ underlying: 'ORRERY', lastTickMs: 9_000, stale: false }],
      openAlerts: () => [{ limitId: 'L-1', severity: 'breach', state: 'raised', utilization: 1.2 }],
    });
    const r = runWith(await m.text(), 'check', 'metrics');
    // prom-client's own default gauges nodejs_active_{handles,requests,resources}_total carry a
    // _total suffix that promtool flags; those names are the library's, every other line must be clean.
    const findings = r.out
      .split('\n')
      .filter((l) => l.trim() !== '')
      .filter((l) => !/^keelson_nodejs_active_(handles|requests|resources)_total non-counter/.test(l));
    expect(findings).toEqual([]);
  });
});

interface AlertRule {
  alert?: string;
  annotations?: Record<string, string>;
}
interface RuleTest {
  alert_rule_test?: { eval_time: string; alertname: string; exp_alerts?: unknown[] }[];
}

const rules = (parse(readFileSync(rulesFile, 'utf8')) as { groups: { rules: AlertRule[] }[] }).groups.flatMap(
  (g) => g.rules,
);
const alertNames = rules.flatMap((r) => (r.alert ? [r.alert] : []));

describe('alert rule coverage (without promtool too)', () => {
  it('has the alerts operations asked for', () => {
    expect(alertNames).toEqual(
      expect.arrayContaining([
        'KeelsonFeedQuiet',
        'KeelsonConsumerFallingBehind',
        'KeelsonNotReady',
        'KeelsonRejectsElevated',
        'KeelsonBreachesClimbing',
        'KeelsonTickLatencyOverBudget',
      ]),
    );
  });

  it('fires and then clears every alert in some unit test', () => {
    const checks = testFiles.flatMap((f) =>
      ((parse(readFileSync(f, 'utf8')) as { tests: RuleTest[] }).tests ?? []).flatMap(
        (t) => t.alert_rule_test ?? [],
      ),
    );
    const seconds = (d: string) => {
      const m = /^(\d+)([smh])$/.exec(d);
      if (!m) throw new Error(`eval_time ${d}: expected a plain duration such as 12m`);
      return Number(m[1]) * { s: 1, m: 60, h: 3600 }[m[2] as 's' | 'm' | 'h'];
    };
    for (const name of alertNames) {
      const mine = checks.filter((c) => c.alertname === name);
      const fired = mine.filter((c) => (c.exp_alerts ?? []).length > 0).map((c) => seconds(c.eval_time));
      expect(fired.length, `${name} never fires in a test`).toBeGreaterThan(0);
      const clearedAfter = mine.filter(
        (c) => (c.exp_alerts ?? []).length === 0 && seconds(c.eval_time) > Math.min(...fired),
      );
      expect(clearedAfter.length, `${name} is never shown to clear after firing`).toBeGreaterThan(0);
    }
  });

  it('links every alert to an anchor that exists in deploy/RUNBOOK.md', () => {
    const runbook = readFileSync(join(root, 'deploy/RUNBOOK.md'), 'utf8');
    for (const r of rules.filter((x) => x.alert)) {
      const url = r.annotations?.runbook_url ?? '';
      const m = /^deploy\/RUNBOOK\.md#([a-z0-9-]+)$/.exec(url);
      expect(m, `${r.alert}: runbook_url ${url}`).not.toBeNull();
      expect(runbook, `${r.alert}: anchor ${m?.[1]} missing`).toContain(`<a id="${m?.[1]}"></a>`);
    }
  });
});
