// `keelson replay` over the hand-written tape tests/fixtures/tapes/harbour-morning.jsonl (its
// README lists what each line does). The option of line 5 reproduces Hull's example, "Options,
// Futures, and Other Derivatives": S=42, K=40, r=10%, sigma=20%, T=0.5, call 4.76 per unit and
// N(d1) = 0.7791 (values from memory), cross-checked with the npm black-scholes package.
import { execFile } from 'node:child_process';
import { mkdtemp, readFile } from 'node:fs/promises';
import { createRequire } from 'node:module';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { PassThrough } from 'node:stream';
import { promisify } from 'node:util';
import { describe, expect, it } from 'vitest';
import { alertSchema, exposureSchema, rejectedSchema, staleFeedSchema } from '@keelson/shared-types';
import type { AlertMsg, ExposureMsg, RejectedMsg, StaleFeedMsg } from '@keelson/shared-types';
import { run } from '../services/cli/src/commands/replay.ts';

const { blackScholes } = createRequire(import.meta.url)('black-scholes') as {
  blackScholes: (s: number, k: number, t: number, v: number, r: number, cp: 'call' | 'put') => number;
};

const TAPE = join(import.meta.dirname, 'fixtures/tapes/harbour-morning.jsonl');

async function replay(args: string[]): Promise<{ code: number; out: string; err: string }> {
  const stdout = new PassThrough();
  const stderr = new PassThrough();
  let out = '';
  let err = '';
  stdout.on('data', (c) => (out += String(c)));
  stderr.on('data', (c) => (err += String(c)));
  const code = await run(args, { stdin: new PassThrough(), stdout, stderr });
  return { code, out, err };
}

const lines = (s: string): unknown[] =>
  s
    .split('\n')
    .filter((l) => l !== '')
    .map((l) => JSON.parse(l) as unknown);

describe('keelson replay harbour-morning.jsonl', async () => {
  const dir = await mkdtemp(join(tmpdir(), 'keelson-replay-'));
  const res = await replay([TAPE, '--out', dir]);
  const exposuresText = await readFile(join(dir, 'exposures.jsonl'), 'utf8');
  const alertsText = await readFile(join(dir, 'alerts.jsonl'), 'utf8');
  const rejectedText = await readFile(join(dir, 'rejected.jsonl'), 'utf8');
  const exposures = lines(exposuresText) as ExposureMsg[];
  const alerts = lines(alertsText) as (AlertMsg | StaleFeedMsg)[];
  const rejected = lines(rejectedText) as RejectedMsg[];
  const node = (k: string): ExposureMsg => {
    const n = exposures.find((x) => x.nodeKey === k);
    if (!n) throw new Error(`no node ${k}`);
    return n;
  };

  it('reads the tape and prints the counts', () => {
    expect(res.code).toBe(0);
    expect(res.err).toBe('');
    expect(res.out).toBe(
      `replayed harbour-morning.jsonl: 22 lines, 18 accepted, 1 duplicates, 3 rejected; 12 nodes, 4 alerts, 6 stale-feed events -> ${dir}\n`,
    );
  });

  it('writes contract messages only', () => {
    for (const e of exposures) expect(exposureSchema.safeParse(e).success).toBe(true);
    for (const a of alerts)
      expect((a.type === 'alert' ? alertSchema : staleFeedSchema).safeParse(a).success).toBe(true);
    for (const r of rejected) expect(rejectedSchema.safeParse(r).success).toBe(true);
  });

  it('reproduces the Hull call in the final snapshot (valued at the last tape time, tau = 0.5)', () => {
    const n = node('desk=TIDEWATER/book=TW-CORE/underlying=OSPREY');
    expect(n.pv / 1000).toBeCloseTo(4.76, 2); // Hull
    expect(n.pv / 1000).toBeCloseTo(blackScholes(42, 40, 0.5, 0.2, 0.1, 'call'), 6); // npm black-scholes
    expect(n.pnl).toBeCloseTo(n.pv - 4500, 9);
    expect(n.delta! / 1000).toBeCloseTo(0.7791, 4); // Hull: N(d1)
    expect(n).toMatchObject({
      positions: 1,
      unpriced: {},
      stale: false,
      asOf: '2026-03-02T09:00:24.000Z',
      currency: 'USD',
    });
  });

  it('converts the GBP position at the latest GBPUSD and keeps the reference-less one unpriced', () => {
    // 1000 shares at 2.5 GBP, bought at 2.4, GBPUSD 1.3 (arithmetic)
    expect(node('underlying=GANNET')).toMatchObject({ delta: 1000, unpriced: {}, stale: false });
    expect(node('underlying=GANNET').pv).toBeCloseTo(3250, 9);
    expect(node('underlying=GANNET').pnl).toBeCloseTo(130, 9);
    expect(node('underlying=PETREL')).toMatchObject({ positions: 1, unpriced: { 'no-reference': 1 }, pv: 0 });
    const firm = node('firm');
    expect(firm).toMatchObject({
      positions: 3,
      unpriced: { 'no-reference': 1 },
      delta: null,
      gamma: null,
      stale: false,
    });
    expect(firm.pv).toBeCloseTo(node('underlying=OSPREY').pv + 3250, 9);
  });

  it('lists every kept node in nodeKey order, and no dropped one', () => {
    expect(exposures.map((x) => x.nodeKey)).toEqual([
      'desk=SHOAL',
      'desk=SHOAL/book=SH-1',
      'desk=SHOAL/book=SH-1/underlying=GANNET',
      'desk=SHOAL/book=SH-2',
      'desk=SHOAL/book=SH-2/underlying=PETREL',
      'desk=TIDEWATER',
      'desk=TIDEWATER/book=TW-CORE',
      'desk=TIDEWATER/book=TW-CORE/underlying=OSPREY',
      'firm',
      'underlying=GANNET',
      'underlying=OSPREY',
      'underlying=PETREL',
    ]);
  });

  it('walks the delta limit through raised, escalated, eased, cleared, with stale feeds in order', () => {
    const brief = alerts.map((a) =>
      a.type === 'alert'
        ? `${a.alertId} ${a.state} ${a.severity} @${a.ts.slice(11, 19)}`
        : `${a.underlying} stale ${a.state} @${a.ts.slice(11, 19)}`,
    );
    expect(brief).toEqual([
      'L-OSPREY-DELTA#1 raised warning @09:00:01',
      'L-OSPREY-DELTA#1 escalated breach @09:00:01',
      'L-OSPREY-DELTA#1 eased warning @09:00:03',
      'OSPREY stale raised @09:00:20',
      'GANNET stale raised @09:00:20',
      // GBPUSD's own last tick (09:00:05) is 15 s old when its next one arrives: raised, then
      // cleared by that very tick, so the quiet spell is on record
      'GBPUSD stale raised @09:00:20',
      'GBPUSD stale cleared @09:00:20',
      'OSPREY stale cleared @09:00:24',
      'L-OSPREY-DELTA#1 cleared ok @09:00:24',
      'GANNET stale cleared @09:00:24',
    ]);
    const stale = alerts[3] as StaleFeedMsg;
    expect(stale.lastTick).toBe('2026-03-02T09:00:02.000Z');
    const cleared = alerts[8] as AlertMsg;
    expect(cleared.value).toBeCloseTo(node('underlying=OSPREY').delta!, 9);
    expect(cleared.utilization).toBeLessThan(0.75);
    expect(cleared.utilization).toBeGreaterThan(0.74);
  });

  it('keeps each rejected line with its reason, its source and the tape time', () => {
    expect(rejected.map((r) => [r.source, r.ts])).toEqual([
      ['harbour-morning.jsonl line 11', '2026-03-02T09:00:02.000Z'],
      ['harbour-morning.jsonl line 14', '2026-03-02T09:00:03.000Z'],
      ['harbour-morning.jsonl line 15', '2026-03-02T09:00:03.000Z'],
    ]);
    expect(rejected[0]?.reason).toMatch(/^trade\.underlying may not change from OSPREY to GANNET/);
    expect(rejected[1]?.reason).toMatch(/JSON/);
    expect(rejected[1]?.raw).toBe('{"type":"spot","underlying":"OSPREY","price":');
    expect(rejected[2]?.reason).toBe('spot.price must be > 0');
  });

  it('writes byte-identical files on a second run', async () => {
    const again = await mkdtemp(join(tmpdir(), 'keelson-replay-'));
    expect((await replay([TAPE, '--out', again])).code).toBe(0);
    expect(await readFile(join(again, 'exposures.jsonl'), 'utf8')).toBe(exposuresText);
    expect(await readFile(join(again, 'alerts.jsonl'), 'utf8')).toBe(alertsText);
    expect(await readFile(join(again, 'rejected.jsonl'), 'utf8')).toBe(rejectedText);
  });

  it('runs the same through `npx keelson replay` as a child process', async () => {
    const child = await mkdtemp(join(tmpdir(), 'keelson-replay-'));
    const { stdout } = await promisify(execFile)('npx', ['keelson', 'replay', TAPE, '--out', child], {
      cwd: join(import.meta.dirname, '..'),
    });
    expect(stdout).toMatch(/22 lines, 18 accepted, 1 duplicates, 3 rejected; 12 nodes/);
    expect(await readFile(join(child, 'exposures.jsonl'), 'utf8')).toBe(exposuresText);
  });
});
