// `keelson price`: value options from JSON lines, one result line per input line, in order.
// This is a desk tool over the quant core, so its input schema is its own (validated here with
// zod) rather than the bus contract's.
import { createReadStream } from 'node:fs';
import { access, constants } from 'node:fs/promises';
import { createInterface } from 'node:readline';
import { z } from 'zod';
import { impliedVol, ImpliedVolError, priceOption } from '@keelson/quant';
import type { Greeks, OptionInputs } from '@keelson/quant';
import type { CommandIo } from '../main.ts';

const HELP = `usage: keelson price [FILE...]

Values European options under generalized Black-Scholes-Merton. Reads JSON lines from the FILEs
in order (or from stdin when none is given; '-' names stdin) and writes one JSON line per input
line, in the same order. Blank lines are skipped but still counted.

input fields
  id              any JSON value, echoed back (null when absent)
  right           call | put                                              required
  payoff          vanilla | cash-digital | asset-digital                  default vanilla
  underlyingKind  equity | fx | future                                    default equity
  spot            spot price (> 0); for a future, the futures price       required
  strike          strike (> 0)                                            required
  years           time to expiry in years, ACT/365, [0, 100]; 0 = expired required
  vol             volatility, decimal (0.25 = 25%), in (0, 10]
  premium         option price per unit: solve the implied vol, then price at it
                  (exactly one of vol and premium; implied vol is for vanilla payoffs only)
  rate            continuously compounded discount rate, decimal, [-1, 1] required
                  (fx: the quote currency's rate)
  dividendYield   continuous dividend yield (equity only), [-1, 1]        default 0
  foreignRate     base currency's rate (fx only), [-1, 1]                 default 0
  cashAmount      payout of a cash-digital (cash-digital only, > 0)       default 1
  Carry: equity b = rate - dividendYield; fx b = rate - foreignRate (Garman-Kohlhagen);
  future b = 0 (Black-76; rho then moves the discounting only).

output fields (per unit of the option)
  id, price
  delta   dV/dS
  gamma   d2V/dS2
  vega    dV/dvol x 0.01            value change per vol point
  theta   -dV/dyears / 365          value change per calendar day, rate, carry, vol and spot held
  rho     dV/drate x 0.01           per 1% of rate; equity and fx carry moves with the rate
  vanna   d2V/dS dvol x 0.01        delta change per vol point
  volga   d2V/dvol2 x 1e-4          per-point vega change per vol point
  charm   -d(delta)/dyears / 365    delta change per calendar day
  impliedVol                        only when premium was given
  A rejected line prints {"id": <id or null>, "line": n, "error": "<reason naming the field>"}
  (plus "file" when more than one input is given) and processing goes on.

exit status
  0 every line priced, 2 some lines rejected, 1 usage or I/O error
`;

const RATE_LIMIT = 1; // |rate| <= 100%: beyond that exp(-r t) over decades leaves double range

function numberField(name: string) {
  return z.number({
    error: (iss) =>
      iss.input === undefined
        ? `${name} is required`
        : `${name} must be a finite number (got ${show(iss.input)})`,
  });
}

const rateField = (name: string) =>
  numberField(name)
    .gte(-RATE_LIMIT, { error: (iss) => `${name} must be in [-1, 1] (got ${show(iss.input)})` })
    .lte(RATE_LIMIT, { error: (iss) => `${name} must be in [-1, 1] (got ${show(iss.input)})` });

const enumField = <T extends readonly [string, ...string[]]>(name: string, values: T) =>
  z.enum(values, { error: (iss) => `${name} must be one of ${values.join(', ')} (got ${show(iss.input)})` });

const LineSchema = z.strictObject(
  {
    id: z.unknown().optional(),
    right: enumField('right', ['call', 'put'] as const),
    payoff: enumField('payoff', ['vanilla', 'cash-digital', 'asset-digital'] as const).default('vanilla'),
    underlyingKind: enumField('underlyingKind', ['equity', 'fx', 'future'] as const).default('equity'),
    spot: numberField('spot').gt(0, { error: (iss) => `spot must be > 0 (got ${show(iss.input)})` }),
    strike: numberField('strike').gt(0, { error: (iss) => `strike must be > 0 (got ${show(iss.input)})` }),
    years: numberField('years')
      .gte(0, { error: (iss) => `years must be >= 0 (got ${show(iss.input)})` })
      .lte(100, { error: (iss) => `years must be <= 100 (got ${show(iss.input)})` }),
    vol: numberField('vol')
      .gt(0, { error: (iss) => `vol must be > 0 (got ${show(iss.input)})` })
      .lte(10, { error: (iss) => `vol must be <= 10, i.e. 1000% (got ${show(iss.input)})` })
      .optional(),
    premium: numberField('premium').optional(),
    rate: rateField('rate'),
    dividendYield: rateField('dividendYield').optional(),
    foreignRate: rateField('foreignRate').optional(),
    cashAmount: numberField('cashAmount')
      .gt(0, { error: (iss) => `cashAmount must be > 0 (got ${show(iss.input)})` })
      .optional(),
  },
  {
    error: (iss) =>
      iss.code === 'unrecognized_keys'
        ? `unknown field ${iss.keys.map((k) => `'${k}'`).join(', ')}`
        : undefined,
  },
);
type Line = z.infer<typeof LineSchema>;

function show(v: unknown): string {
  if (v === undefined) return 'nothing';
  const s = JSON.stringify(v);
  return s === undefined ? String(v) : s.length > 40 ? `${s.slice(0, 37)}...` : s;
}

class LineError extends Error {}

/** The cross-field rules zod's per-field view cannot state. */
function checkCombination(l: Line): void {
  if (l.vol !== undefined && l.premium !== undefined)
    throw new LineError('give either vol or premium, not both');
  if (l.vol === undefined && l.premium === undefined) throw new LineError('vol or premium is required');
  if (l.dividendYield !== undefined && l.underlyingKind !== 'equity') {
    throw new LineError(`dividendYield applies to equity only (underlyingKind is ${l.underlyingKind})`);
  }
  if (l.foreignRate !== undefined && l.underlyingKind !== 'fx') {
    throw new LineError(`foreignRate applies to fx only (underlyingKind is ${l.underlyingKind})`);
  }
  if (l.cashAmount !== undefined && l.payoff !== 'cash-digital')
    throw new LineError(`cashAmount applies to cash-digital only (payoff is ${l.payoff})`);
}

type Priced = { id: unknown } & Greeks & { impliedVol?: number };

function value(l: Line): Priced {
  checkCombination(l);
  const carry =
    l.underlyingKind === 'equity'
      ? l.rate - (l.dividendYield ?? 0)
      : l.underlyingKind === 'fx'
        ? l.rate - (l.foreignRate ?? 0)
        : 0;
  const base: Omit<OptionInputs, 'vol'> = {
    right: l.right,
    payoff: l.payoff,
    spot: l.spot,
    strike: l.strike,
    tau: l.years,
    rate: l.rate,
    carry,
    cashAmount: l.cashAmount ?? 1,
    rhoCarry: l.underlyingKind !== 'future',
  };
  let vol = l.vol;
  let solved: number | undefined;
  if (vol === undefined) {
    const premium = l.premium!;
    if (l.years === 0) throw new LineError('premium: an expired option (years 0) has no implied vol');
    try {
      solved = impliedVol({ ...base, price: premium });
    } catch (e) {
      if (!(e instanceof ImpliedVolError)) throw e;
      if (e.lower !== undefined && e.upper !== undefined) {
        throw new LineError(
          `premium ${premium} is outside the no-arbitrage bounds (${round(e.lower)}, ${round(e.upper)}) of this ${l.right}: no vol reproduces it`,
        );
      }
      throw new LineError(`premium: ${e.message}`);
    }
    vol = solved;
  }
  const g = priceOption({ ...base, vol });
  const out: Priced = {
    id: l.id ?? null,
    price: g.price,
    delta: g.delta,
    gamma: g.gamma,
    vega: g.vega,
    theta: g.theta,
    rho: g.rho,
    vanna: g.vanna,
    volga: g.volga,
    charm: g.charm,
  };
  if (solved !== undefined) out.impliedVol = solved;
  for (const [k, v] of Object.entries(out)) {
    if (typeof v === 'number' && !Number.isFinite(v))
      throw new LineError(`${k} came out non-finite for these inputs; refusing to print it`);
  }
  return out;
}

function round(x: number): number {
  return Number(x.toPrecision(12));
}

/** One input line to one output line. Exported for tests. */
export function priceLine(text: string, lineNo: number): { ok: boolean; json: string } {
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch (e) {
    return reject(null, lineNo, `line is not valid JSON: ${(e as Error).message}`);
  }
  if (typeof raw !== 'object' || raw === null || Array.isArray(raw)) {
    return reject(
      null,
      lineNo,
      `line must be a JSON object (got ${Array.isArray(raw) ? 'an array' : show(raw)})`,
    );
  }
  const id = (raw as { id?: unknown }).id ?? null;
  const parsed = LineSchema.safeParse(raw);
  if (!parsed.success) return reject(id, lineNo, parsed.error.issues.map((i) => i.message).join('; '));
  try {
    return { ok: true, json: JSON.stringify(value(parsed.data)) };
  } catch (e) {
    if (e instanceof LineError) return reject(id, lineNo, e.message);
    throw e;
  }
}

function reject(id: unknown, line: number, error: string): { ok: false; json: string } {
  return { ok: false, json: JSON.stringify({ id, line, error }) };
}

interface Source {
  name: string;
  open: () => NodeJS.ReadableStream;
}

async function write(out: NodeJS.WritableStream, s: string): Promise<void> {
  if (!out.write(s)) await new Promise<void>((resolve) => out.once('drain', () => resolve()));
}

export async function run(argv: string[], io: CommandIo): Promise<number> {
  const files: string[] = [];
  let optionsDone = false;
  for (const a of argv) {
    if (!optionsDone && (a === '--help' || a === '-h')) {
      io.stdout.write(HELP);
      return 0;
    }
    if (!optionsDone && a === '--') optionsDone = true;
    else if (!optionsDone && a.startsWith('-') && a !== '-') {
      io.stderr.write(`keelson price: unknown option '${a}'\n\n${HELP}`);
      return 1;
    } else files.push(a);
  }
  const sources: Source[] = [];
  if (files.length === 0) sources.push({ name: '-', open: () => io.stdin });
  for (const f of files) {
    if (f === '-') {
      sources.push({ name: '-', open: () => io.stdin });
      continue;
    }
    try {
      await access(f, constants.R_OK);
    } catch (e) {
      io.stderr.write(
        `keelson price: cannot read ${f}: ${(e as NodeJS.ErrnoException).code ?? (e as Error).message}\n`,
      );
      return 1;
    }
    sources.push({ name: f, open: () => createReadStream(f, { encoding: 'utf8' }) });
  }

  let rejected = 0;
  const tagFile = sources.length > 1;
  for (const src of sources) {
    let lineNo = 0;
    try {
      const rl = createInterface({ input: src.open(), crlfDelay: Infinity });
      for await (const rawLine of rl) {
        lineNo++;
        const text = lineNo === 1 ? rawLine.replace(/^\uFEFF/, '') : rawLine;
        if (text.trim() === '') continue;
        const r = priceLine(text, lineNo);
        if (!r.ok) rejected++;
        const json = tagFile && !r.ok ? `${r.json.slice(0, -1)},"file":${JSON.stringify(src.name)}}` : r.json;
        await write(io.stdout, `${json}\n`);
      }
    } catch (e) {
      io.stderr.write(
        `keelson price: reading ${src.name === '-' ? 'stdin' : src.name} failed after line ${lineNo}: ${(e as Error).message}\n`,
      );
      return 1;
    }
  }
  return rejected > 0 ? 2 : 0;
}
