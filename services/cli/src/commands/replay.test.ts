// The replay command's own behaviour: options, exit codes, errors, sources. The valuation itself is
// tested in tests/replay.test.ts and in the engine's tests.
import { mkdtemp, readFile, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { PassThrough } from 'node:stream';
import { describe, expect, it } from 'vitest';
import { run } from './replay.ts';

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

async function tape(lines: object[] | string): Promise<string> {
  const dir = await mkdtemp(join(tmpdir(), 'keelson-tape-'));
  const p = join(dir, 'small.jsonl');
  await writeFile(
    p,
    typeof lines === 'string' ? lines : lines.map((l) => JSON.stringify(l)).join('\n') + '\n',
  );
  return p;
}

const T = '2026-03-02T09:00:00Z';
const small = [
  { type: 'underlying', underlying: 'MARLIN', kind: 'equity', currency: 'EUR', ts: T },
  { type: 'spot', underlying: 'MARLIN', price: 8, ts: T },
  {
    type: 'trade',
    tradeId: 'M1',
    version: 1,
    action: 'new',
    ts: T,
    desk: 'SHOAL',
    book: 'SH-1',
    underlying: 'MARLIN',
    instrument: { kind: 'linear' },
    quantity: 10,
    price: 7,
  },
  { type: 'spot', underlying: 'EURUSD', price: 1.25, ts: '2026-03-02T09:00:03Z' },
];

describe('keelson replay: usage', () => {
  it('prints help and exits 0', async () => {
    const r = await replay(['--help']);
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/^usage: keelson replay TAPE --out DIR/);
    expect(r.out).toMatch(/--stale-after SECONDS/);
  });

  it.each([
    [[], /missing TAPE/],
    [['t.jsonl'], /missing --out DIR/],
    [['t.jsonl', '--out'], /--out needs a directory/],
    [['t.jsonl', '--out', 'd', '--bogus'], /unknown option --bogus/],
    [
      ['t.jsonl', '--out', 'd', '--reporting-currency', 'usd'],
      /--reporting-currency needs a three-letter upper-case code \(got "usd"\)/,
    ],
    [
      ['t.jsonl', '--out', 'd', '--stale-after', '-1'],
      /--stale-after needs a number of seconds >= 0 \(got "-1"\)/,
    ],
    [['t.jsonl', '--out', 'd', '--stale-after', 'soon'], /--stale-after needs a number/],
    [['a.jsonl', 'b.jsonl', '--out', 'd'], /one tape only/],
  ])('rejects %j with exit 1', async (args, reason) => {
    const r = await replay(args);
    expect(r.code).toBe(1);
    expect(r.err).toMatch(reason);
  });

  it('exits 1 when the tape cannot be read', async () => {
    const r = await replay(['/nonexistent/tape.jsonl', '--out', tmpdir()]);
    expect(r.code).toBe(1);
    expect(r.err).toMatch(/^keelson replay: cannot read tape \/nonexistent\/tape\.jsonl: ENOENT/);
  });
});

describe('keelson replay: options', () => {
  it('values in the reporting currency asked for', async () => {
    const out = await mkdtemp(join(tmpdir(), 'keelson-out-'));
    expect((await replay([await tape(small), '--out', out, '--reporting-currency', 'EUR'])).code).toBe(0);
    const firm = (await readFile(join(out, 'exposures.jsonl'), 'utf8'))
      .split('\n')
      .map((l) => (l ? JSON.parse(l) : null))
      .find((e) => e?.nodeKey === 'firm');
    expect(firm).toMatchObject({ currency: 'EUR', pv: 80, pnl: 10 });
  });

  it('converts into USD by default, and honours --stale-after', async () => {
    const out = await mkdtemp(join(tmpdir(), 'keelson-out-'));
    expect((await replay([await tape(small), '--out', out])).code).toBe(0);
    const text = await readFile(join(out, 'exposures.jsonl'), 'utf8');
    expect(JSON.parse(text.split('\n')[3] as string)).toMatchObject({
      nodeKey: 'firm',
      currency: 'USD',
      pv: 100,
      stale: false,
    });
    expect(await readFile(join(out, 'alerts.jsonl'), 'utf8')).toBe('');
    const out2 = await mkdtemp(join(tmpdir(), 'keelson-out-'));
    expect((await replay([await tape(small), '--out', out2, '--stale-after=2.5'])).code).toBe(0);
    expect(JSON.parse(await readFile(join(out2, 'alerts.jsonl'), 'utf8'))).toEqual({
      type: 'stale-feed',
      underlying: 'MARLIN',
      state: 'raised',
      lastTick: '2026-03-02T09:00:00.000Z',
      ts: '2026-03-02T09:00:03.000Z',
    });
  });

  it('names rejected lines by file and physical line, blank and CRLF lines included', async () => {
    const p = await tape(`${JSON.stringify(small[0])}\r\n\r\n{"type":"spot"}\r\nnope\n`);
    const out = await mkdtemp(join(tmpdir(), 'keelson-out-'));
    const r = await replay([p, '--out', out]);
    expect(r.out).toMatch(/3 lines, 1 accepted, 0 duplicates, 2 rejected; 0 nodes/);
    const rejected = (await readFile(join(out, 'rejected.jsonl'), 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l) as { source: string; raw: string });
    expect(rejected.map((x) => [x.source, x.raw])).toEqual([
      ['small.jsonl line 3', '{"type":"spot"}'],
      ['small.jsonl line 4', 'nope'],
    ]);
  });

  it('reads an empty tape', async () => {
    const out = await mkdtemp(join(tmpdir(), 'keelson-out-'));
    const r = await replay([await tape(''), '--out', out]);
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/0 lines, 0 accepted/);
    expect(await readFile(join(out, 'exposures.jsonl'), 'utf8')).toBe('');
  });
});
