import { describe, expect, it } from 'vitest';
import { PassThrough } from 'node:stream';
import { execFile } from 'node:child_process';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { priceOption } from '@keelson/quant';
import { run } from './price.ts';

const repoRoot = resolve(dirname(fileURLToPath(import.meta.url)), '../../../..');

async function price(
  argv: string[],
  stdinText = '',
): Promise<{ code: number; out: Record<string, unknown>[]; err: string }> {
  const stdin = new PassThrough();
  const stdout = new PassThrough();
  const stderr = new PassThrough();
  let out = '';
  let err = '';
  stdout.on('data', (c: Buffer) => (out += c.toString()));
  stderr.on('data', (c: Buffer) => (err += c.toString()));
  stdin.end(stdinText);
  const code = await run(argv, { stdin, stdout, stderr });
  return {
    code,
    out: out
      .split('\n')
      .filter((l) => l !== '')
      .map((l) => JSON.parse(l) as Record<string, unknown>),
    err,
  };
}
const lines = (...xs: unknown[]): string =>
  xs.map((x) => (typeof x === 'string' ? x : JSON.stringify(x))).join('\n') + '\n';

describe('keelson price: valuations', () => {
  it('prices the Hull example (S=42 K=40 r=10% sigma=20% T=0.5: call 4.76, put 0.81) with every Greek', async () => {
    const { code, out } = await price(
      [],
      lines(
        { id: 'h1', right: 'call', spot: 42, strike: 40, years: 0.5, vol: 0.2, rate: 0.1 },
        { id: 'h2', right: 'put', spot: 42, strike: 40, years: 0.5, vol: 0.2, rate: 0.1 },
      ),
    );
    expect(code).toBe(0);
    expect(out).toHaveLength(2);
    expect(Object.keys(out[0]!)).toEqual([
      'id',
      'price',
      'delta',
      'gamma',
      'vega',
      'theta',
      'rho',
      'vanna',
      'volga',
      'charm',
    ]);
    expect(out[0]!.id).toBe('h1');
    expect(out[0]!.price as number).toBeCloseTo(4.76, 2);
    expect(out[1]!.price as number).toBeCloseTo(0.81, 2);
    // the command adds no arithmetic of its own
    expect(out[0]).toEqual({
      id: 'h1',
      ...priceOption({
        right: 'call',
        payoff: 'vanilla',
        spot: 42,
        strike: 40,
        tau: 0.5,
        vol: 0.2,
        rate: 0.1,
        carry: 0.1,
      }),
    });
  });

  it('maps each underlyingKind to its carry (Haug 2007 examples, quoted from memory)', async () => {
    const { code, out } = await price(
      [],
      lines(
        // Merton 1973 with dividend yield: put 2.4648
        {
          id: 'eq',
          right: 'put',
          spot: 100,
          strike: 95,
          years: 0.5,
          vol: 0.2,
          rate: 0.1,
          dividendYield: 0.05,
        },
        // Garman-Kohlhagen: call 0.0291
        {
          id: 'fx',
          right: 'call',
          underlyingKind: 'fx',
          spot: 1.56,
          strike: 1.6,
          years: 0.5,
          vol: 0.12,
          rate: 0.06,
          foreignRate: 0.08,
        },
        // Black-76: call 1.7011
        {
          id: 'fut',
          right: 'call',
          underlyingKind: 'future',
          spot: 19,
          strike: 19,
          years: 0.75,
          vol: 0.28,
          rate: 0.1,
        },
        // Reiner-Rubinstein cash-or-nothing put with b = 0: 2.6710 (a future: carry 0)
        {
          id: 'cash',
          right: 'put',
          payoff: 'cash-digital',
          underlyingKind: 'future',
          spot: 100,
          strike: 80,
          years: 0.75,
          vol: 0.35,
          rate: 0.06,
          cashAmount: 10,
        },
        // asset-or-nothing put, q = 5%: 20.2069
        {
          id: 'asset',
          right: 'put',
          payoff: 'asset-digital',
          spot: 70,
          strike: 65,
          years: 0.5,
          vol: 0.27,
          rate: 0.07,
          dividendYield: 0.05,
        },
      ),
    );
    expect(code).toBe(0);
    const byId = Object.fromEntries(out.map((o) => [o.id, o]));
    expect(byId.eq!.price as number).toBeCloseTo(2.4648, 4);
    expect(byId.fx!.price as number).toBeCloseTo(0.0291, 4);
    expect(byId.fut!.price as number).toBeCloseTo(1.7011, 4);
    expect(byId.cash!.price as number).toBeCloseTo(2.671, 4);
    expect(byId.asset!.price as number).toBeCloseTo(20.2069, 4);
    // Black-76 rho moves only the discounting: -T V per unit, x 0.01
    expect(byId.fut!.rho as number).toBeCloseTo(-0.75 * (byId.fut!.price as number) * 0.01, 14);
  });

  it('solves the implied vol from a premium and prices at it', async () => {
    const vol = 0.237;
    const g = priceOption({
      right: 'call',
      payoff: 'vanilla',
      spot: 100,
      strike: 110,
      tau: 1.25,
      vol,
      rate: 0.04,
      carry: 0.04 - 0.015,
    });
    const { code, out } = await price(
      [],
      lines({
        id: { desk: 'X' },
        right: 'call',
        spot: 100,
        strike: 110,
        years: 1.25,
        premium: g.price,
        rate: 0.04,
        dividendYield: 0.015,
      }),
    );
    expect(code).toBe(0);
    expect(out[0]!.id).toEqual({ desk: 'X' });
    expect(Math.abs((out[0]!.impliedVol as number) - vol)).toBeLessThan(1e-10);
    expect(out[0]!.price as number).toBeCloseTo(g.price, 12);
  });

  it('an expired option is worth its intrinsic value with zero Greeks', async () => {
    const { out } = await price(
      [],
      lines({ right: 'call', spot: 105, strike: 100, years: 0, vol: 0.2, rate: 0.05 }),
    );
    expect(out[0]).toEqual({
      id: null,
      price: 5,
      delta: 0,
      gamma: 0,
      vega: 0,
      theta: 0,
      rho: 0,
      vanna: 0,
      volga: 0,
      charm: 0,
    });
  });
});

describe('keelson price: rejected lines name the field and the run goes on', () => {
  const good = { right: 'call', spot: 100, strike: 100, years: 1, vol: 0.2, rate: 0.03 };
  it.each([
    ['{"id": 1, "right": "call",', null, /not valid JSON/],
    ['[1, 2]', null, /must be a JSON object \(got an array\)/],
    [{ ...good, id: 'm', strike: undefined }, 'm', /^strike is required$/],
    [{ ...good, id: 't', spot: '100' }, 't', /^spot must be a finite number \(got "100"\)$/],
    [{ ...good, right: 'straddle' }, null, /^right must be one of call, put \(got "straddle"\)$/],
    [{ ...good, payoff: 'barrier' }, null, /^payoff must be one of vanilla, cash-digital, asset-digital/],
    [{ ...good, vol: 0 }, null, /^vol must be > 0 \(got 0\)$/],
    [{ ...good, vol: 12 }, null, /^vol must be <= 10/],
    [{ ...good, years: -1 }, null, /^years must be >= 0/],
    [{ ...good, years: 250 }, null, /^years must be <= 100/],
    [{ ...good, rate: 3 }, null, /^rate must be in \[-1, 1\]/],
    [{ ...good, premium: 5 }, null, /^give either vol or premium, not both$/],
    [{ ...good, vol: undefined }, null, /^vol or premium is required$/],
    [
      { ...good, vol: undefined, premium: 150 },
      null,
      /^premium 150 is outside the no-arbitrage bounds \(2\.95\d*, 100\) of this call/,
    ],
    [
      { ...good, vol: undefined, premium: 0.1, payoff: 'cash-digital' },
      null,
      /^premium: implied vol is solved for vanilla options only/,
    ],
    [{ ...good, vol: undefined, premium: 1, years: 0 }, null, /^premium: an expired option/],
    [{ ...good, underlyingKind: 'fx', dividendYield: 0.01 }, null, /^dividendYield applies to equity only/],
    [{ ...good, foreignRate: 0.01 }, null, /^foreignRate applies to fx only/],
    [{ ...good, cashAmount: 5 }, null, /^cashAmount applies to cash-digital only/],
    [{ ...good, volatility: 0.2 }, null, /^unknown field 'volatility'$/],
  ])('%s', async (line, id, reason) => {
    const { code, out } = await price([], lines(good, line, good));
    expect(code).toBe(2);
    expect(out).toHaveLength(3);
    expect(out[0]!.price).toBeTypeOf('number');
    expect(out[2]!.price).toBeTypeOf('number');
    expect(Object.keys(out[1]!)).toEqual(['id', 'line', 'error']);
    expect(out[1]!.id).toBe(id);
    expect(out[1]!.line).toBe(2);
    expect(out[1]!.error).toMatch(reason);
  });

  it('skips blank lines but counts them', async () => {
    const { code, out } = await price([], `\n${JSON.stringify(good)}\r\n   \n{"right":"put"}\n`);
    expect(code).toBe(2);
    expect(out).toHaveLength(2);
    expect(out[1]).toMatchObject({ id: null, line: 4 });
    expect(out[1]!.error).toMatch(/spot is required; strike is required; years is required/);
  });
});

describe('keelson price: arguments, files and exit codes', () => {
  const dir = mkdtempSync(join(tmpdir(), 'keelson-price-'));
  const a = join(dir, 'a.jsonl');
  const b = join(dir, 'b.jsonl');
  writeFileSync(
    a,
    lines({ id: 'a1', right: 'call', spot: 100, strike: 100, years: 1, vol: 0.2, rate: 0.03 }),
  );
  writeFileSync(
    b,
    lines(
      { id: 'b1', right: 'put', spot: 100, strike: 100, years: 1, vol: 0.2, rate: 0.03 },
      { id: 'b2', right: 'put' },
    ),
  );

  it('reads file arguments in order; with several inputs a rejection names its file', async () => {
    const { code, out } = await price([a, b]);
    expect(code).toBe(2);
    expect(out.map((o) => o.id)).toEqual(['a1', 'b1', 'b2']);
    expect(out[2]).toMatchObject({ id: 'b2', line: 2, file: b });
  });
  it('exits 0 when every line priced', async () => {
    expect((await price([a])).code).toBe(0);
  });
  it('exits 1 on an unknown option or an unreadable file, before writing anything', async () => {
    const u = await price(['--fast']);
    expect(u.code).toBe(1);
    expect(u.err).toMatch(/unknown option '--fast'/);
    const f = await price([a, join(dir, 'missing.jsonl')]);
    expect(f.code).toBe(1);
    expect(f.out).toHaveLength(0);
    expect(f.err).toMatch(/cannot read .*missing\.jsonl: ENOENT/);
    const d = await price([dir]);
    expect(d.code).toBe(1);
    expect(d.err).toMatch(/failed/);
  });
  it('--help lists the fields and their units', async () => {
    const stdout = new PassThrough();
    let text = '';
    stdout.on('data', (c: Buffer) => (text += c.toString()));
    expect(await run(['--help'], { stdin: new PassThrough(), stdout, stderr: new PassThrough() })).toBe(0);
    for (const word of [
      'underlyingKind',
      'dividendYield',
      'foreignRate',
      'cashAmount',
      'premium',
      'per vol point',
      'per calendar day',
      'x 1e-4',
      'exit status',
    ]) {
      expect(text).toContain(word);
    }
  });

  it('works as a child process through npx keelson price', async () => {
    const { stdout, code } = await new Promise<{ stdout: string; code: number }>((res, rej) => {
      const child = execFile('npx', ['keelson', 'price'], { cwd: repoRoot }, (err, so) => {
        if (err && typeof err.code !== 'number') rej(err);
        else res({ stdout: so, code: err ? (err.code as number) : 0 });
      });
      child.stdin!.end(
        lines({ id: 1, right: 'call', spot: 42, strike: 40, years: 0.5, vol: 0.2, rate: 0.1 }, 'oops'),
      );
    });
    expect(code).toBe(2);
    const [first, second] = stdout
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l) as Record<string, unknown>);
    expect(first!.price as number).toBeCloseTo(4.76, 2);
    expect(second).toMatchObject({ id: null, line: 2 });
  }, 60_000);
});
