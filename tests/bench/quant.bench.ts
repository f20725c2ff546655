// Pricing benchmark: price + all nine outputs for a typed-array batch of 1 000 000 mixed options
// on one core, against our own per-call object API and the npm black-scholes / greeks packages,
// all measured in this one process. Run: npm run bench -- quant
import { createRequire } from 'node:module';
import { allocGreeksBatch, allocOptionBatch, priceBatch, priceOption, PAYOFF_CODE, RIGHT_CODE } from '@keelson/quant';
import type { OptionBatch, OptionInputs, Payoff, Right } from '@keelson/quant';
import { Xoshiro128 } from '../../services/quant/test/prng.ts';

const require = createRequire(import.meta.url);
const bs = require('black-scholes') as { blackScholes: (s: number, k: number, t: number, v: number, r: number, cp: string) => number };
const gk = require('greeks') as Record<'getDelta' | 'getGamma' | 'getVega' | 'getTheta' | 'getRho', (...a: (number | string)[]) => number>;

const N = 1_000_000;
const gc = (globalThis as { gc?: () => void }).gc ?? (() => {});

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  return s[s.length >> 1]!;
}

/** Seconds per run, median of `reps` after `warm` unmeasured runs. */
function time(run: () => void, warm: number, reps: number): number {
  for (let i = 0; i < warm; i++) run();
  const t: number[] = [];
  for (let i = 0; i < reps; i++) {
    gc();
    const t0 = process.hrtime.bigint();
    run();
    t.push(Number(process.hrtime.bigint() - t0) / 1e9);
  }
  return median(t);
}

// An invented book: both rights, the three payoffs in random order, strikes 60%..160% of spot,
// one day to five years, vols 8%..90%, some futures options (b = 0, rho without carry).
function makeBook(n: number): OptionBatch {
  const rng = new Xoshiro128(2026);
  const b = allocOptionBatch(n);
  for (let i = 0; i < n; i++) {
    b.right[i] = rng.uniform() < 0.5 ? 0 : 1;
    const u = rng.uniform();
    b.payoff[i] = u < 0.6 ? 0 : u < 0.8 ? 1 : 2;
    b.spot[i] = 50 + 100 * rng.uniform();
    b.strike[i] = b.spot[i]! * Math.exp(Math.log(0.6) + Math.log(1.6 / 0.6) * rng.uniform());
    b.tau[i] = Math.exp(Math.log(1 / 365) + Math.log(5 * 365) * rng.uniform());
    b.vol[i] = 0.08 + 0.82 * rng.uniform();
    b.rate[i] = 0.05 * rng.uniform();
    const future = rng.uniform() < 0.15;
    b.carry[i] = future ? 0 : b.rate[i]! - 0.04 * rng.uniform();
    b.rhoCarry[i] = future ? 0 : 1;
    b.cashAmount[i] = 1 + Math.floor(10 * rng.uniform());
  }
  return b;
}

const RIGHTS = Object.keys(RIGHT_CODE) as Right[];
const PAYOFFS = Object.keys(PAYOFF_CODE) as Payoff[];

function toObjects(b: OptionBatch): OptionInputs[] {
  const xs: OptionInputs[] = new Array(b.n);
  for (let i = 0; i < b.n; i++) {
    xs[i] = {
      right: RIGHTS[b.right[i]!]!,
      payoff: PAYOFFS[b.payoff[i]!]!,
      spot: b.spot[i]!,
      strike: b.strike[i]!,
      tau: b.tau[i]!,
      vol: b.vol[i]!,
      rate: b.rate[i]!,
      carry: b.carry[i]!,
      cashAmount: b.cashAmount[i]!,
      rhoCarry: b.rhoCarry[i] === 1,
    };
  }
  return xs;
}

const book = makeBook(N);
const out = allocGreeksBatch(N);
const objects = toObjects(book);
// The npm packages know only vanilla options without dividends: give them the vanilla rows.
const vanillaIdx: number[] = [];
for (let i = 0; i < N; i++) if (book.payoff[i] === 0) vanillaIdx.push(i);

let sink = 0;
const rows: { name: string; what: string; n: number; sec: number }[] = [];

const tBatch = time(() => priceBatch(book, out), 3, 9);
rows.push({ name: 'priceBatch (typed arrays)', what: 'price + 8 Greeks', n: N, sec: tBatch });
let bad = 0;
for (let i = 0; i < N; i++) if (!Number.isFinite(out.price[i]! + out.delta[i]! + out.gamma[i]! + out.vega[i]! + out.theta[i]! + out.rho[i]! + out.vanna[i]! + out.volga[i]! + out.charm[i]!)) bad++;

const tObj = time(
  () => {
    let s = 0;
    for (let i = 0; i < N; i++) s += priceOption(objects[i]!).price;
    sink += s;
  },
  1,
  5,
);
rows.push({ name: 'priceOption (object per call)', what: 'price + 8 Greeks', n: N, sec: tObj });

const nBs = Math.min(200_000, vanillaIdx.length);
const tBs = time(
  () => {
    let s = 0;
    for (let j = 0; j < nBs; j++) {
      const i = vanillaIdx[j]!;
      s += bs.blackScholes(book.spot[i]!, book.strike[i]!, book.tau[i]!, book.vol[i]!, book.rate[i]!, book.right[i] === 0 ? 'call' : 'put');
    }
    sink += s;
  },
  1,
  5,
);
rows.push({ name: 'npm black-scholes', what: 'price only', n: nBs, sec: tBs });

const nGk = Math.min(50_000, vanillaIdx.length);
const tGk = time(
  () => {
    let s = 0;
    for (let j = 0; j < nGk; j++) {
      const i = vanillaIdx[j]!;
      const a = [book.spot[i]!, book.strike[i]!, book.tau[i]!, book.vol[i]!, book.rate[i]!] as const;
      const cp = book.right[i] === 0 ? 'call' : 'put';
      s += bs.blackScholes(...a, cp) + gk.getDelta(...a, cp) + gk.getGamma(...a) + gk.getVega(...a) + gk.getTheta(...a, cp) + gk.getRho(...a, cp);
    }
    sink += s;
  },
  1,
  5,
);
rows.push({ name: 'npm black-scholes + greeks', what: 'price + 5 Greeks', n: nGk, sec: tGk });

const rate = (r: { n: number; sec: number }): number => r.n / r.sec;
const batchRate = rate(rows[0]!);
const fmt = (x: number): string => (x >= 1e6 ? `${(x / 1e6).toFixed(2)} M` : `${(x / 1e3).toFixed(1)} k`);
process.stdout.write(`node ${process.version}, one core, ${N.toLocaleString('en-US')} options (60% vanilla, 20% cash, 20% asset digitals), median of repeats\n`);
process.stdout.write(`${'method'.padEnd(32)}${'computes'.padEnd(18)}${'options'.padStart(10)}${'median s'.padStart(11)}${'revals/s'.padStart(12)}${'batch is'.padStart(12)}\n`);
for (const r of rows) {
  const ratio = batchRate / rate(r);
  process.stdout.write(
    `${r.name.padEnd(32)}${r.what.padEnd(18)}${r.n.toLocaleString('en-US').padStart(10)}${r.sec.toFixed(4).padStart(11)}${fmt(rate(r)).padStart(12)}${(ratio < 10 ? ratio.toFixed(2) : ratio.toFixed(0)).padStart(10)} x\n`,
  );
}
process.stdout.write(`non-finite outputs in the batch: ${bad}; target >= 5 M revals/s: ${batchRate >= 5e6 ? 'met' : 'NOT met'} (${fmt(batchRate)})\n`);
if (!Number.isFinite(sink) || bad > 0) process.exitCode = 1;
