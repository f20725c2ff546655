// Pricing benchmark: price + all nine outputs for a typed-array batch of 1 000 000 mixed options
// on one core, against our own per-call object API and the npm black-scholes / greeks packages,
// all measured in this one process. Run: npm run bench -- quant
import { createRequire } from 'node:module';
import { loadavg } from 'node:os';
import {
  allocGreeksBatch,
  allocOptionBatch,
  priceBatch,
  priceOption,
  PAYOFF_CODE,
  RIGHT_CODE,
} from '@keelson/quant';
import type { OptionBatch, OptionInputs, Payoff, Right } from '@keelson/quant';
import { Xoshiro128 } from '../../services/quant/test/prng.ts';

const require = createRequire(import.meta.url);
const bs = require('black-scholes') as {
  blackScholes: (s: number, k: number, t: number, v: number, r: number, cp: string) => number;
};
const gk = require('greeks') as Record<
  'getDelta' | 'getGamma' | 'getVega' | 'getTheta' | 'getRho',
  (...a: (number | string)[]) => number
>;

const N = 1_000_000;
const gc = (globalThis as { gc?: () => void }).gc ?? (() => {});

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  return s[s.length >> 1]!;
}

/**
 * Median wall seconds and median CPU seconds per run, over `reps` runs after `warm` unmeasured
 * ones. CPU time is what this process got of its core: on a shared machine wall time also counts
 * the time other processes held the core, so the table reports both.
 */
function time(run: () => void, warm: number, reps: number): { wall: number; cpu: number } {
  for (let i = 0; i < warm; i++) run();
  const wall: number[] = [];
  const cpu: number[] = [];
  for (let i = 0; i < reps; i++) {
    gc();
    const c0 = process.cpuUsage();
    const t0 = process.hrtime.bigint();
    run();
    wall.push(Number(process.hrtime.bigint() - t0) / 1e9);
    const c = process.cpuUsage(c0);
    cpu.push((c.user + c.system) / 1e6);
  }
  return { wall: median(wall), cpu: median(cpu) };
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

// The same kind of book laid out as an engine revalues it: underlying by underlying, expiry by
// expiry (tau, r and b repeat within an expiry; strike, vol, right and payoff vary).
function makeGroupedBook(n: number): OptionBatch {
  const rng = new Xoshiro128(2027);
  const b = allocOptionBatch(n);
  const perExpiry = 100;
  let spot = 0;
  for (let i = 0; i < n; i++) {
    if (i % (perExpiry * 12) === 0) spot = 50 + 100 * rng.uniform(); // a new underlying, 12 expiries
    if (i % perExpiry === 0) {
      const tau = Math.exp(Math.log(1 / 365) + Math.log(5 * 365) * rng.uniform());
      const rate = 0.05 * rng.uniform();
      const future = rng.uniform() < 0.15;
      for (let j = i; j < Math.min(n, i + perExpiry); j++) {
        b.tau[j] = tau;
        b.rate[j] = rate;
        b.carry[j] = future ? 0 : rate - 0.02;
        b.rhoCarry[j] = future ? 0 : 1;
      }
    }
    b.right[i] = rng.uniform() < 0.5 ? 0 : 1;
    const u = rng.uniform();
    b.payoff[i] = u < 0.6 ? 0 : u < 0.8 ? 1 : 2;
    b.spot[i] = spot;
    b.strike[i] = spot * Math.exp(Math.log(0.6) + Math.log(1.6 / 0.6) * rng.uniform());
    b.vol[i] = 0.08 + 0.82 * rng.uniform();
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
const rows: { name: string; what: string; n: number; sec: { wall: number; cpu: number } }[] = [];

const tBatch = time(() => priceBatch(book, out), 3, 9);
rows.push({ name: 'priceBatch (typed arrays)', what: 'price + 8 Greeks', n: N, sec: tBatch });
let bad = 0;
for (let i = 0; i < N; i++)
  if (
    !Number.isFinite(
      out.price[i]! +
        out.delta[i]! +
        out.gamma[i]! +
        out.vega[i]! +
        out.theta[i]! +
        out.rho[i]! +
        out.vanna[i]! +
        out.volga[i]! +
        out.charm[i]!,
    )
  )
    bad++;

// Least-contended figure: the fastest of many 100 000-row slices of the same book. On a shared
// machine the median above includes other processes' time on this core; the minimum is the
// closest this run gets to the pricer's own speed.
const SLICE = 100_000;
let bestSlice = Infinity;
for (let rep = 0; rep < 60; rep++) {
  const from = (rep % (N / SLICE)) * SLICE;
  const t0 = process.hrtime.bigint();
  priceBatch(book, out, from, from + SLICE);
  bestSlice = Math.min(bestSlice, Number(process.hrtime.bigint() - t0) / 1e9);
}
rows.push({
  name: 'priceBatch, best 100k slice',
  what: 'price + 8 Greeks',
  n: SLICE,
  sec: { wall: bestSlice, cpu: bestSlice },
});

const grouped = makeGroupedBook(N);
const tGrouped = time(() => priceBatch(grouped, out), 3, 9);
rows.push({ name: 'priceBatch, grouped by expiry', what: 'price + 8 Greeks', n: N, sec: tGrouped });

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

// The packages' CDF sums a 100-term series per call: a subset keeps the run short.
const nBs = Math.min(50_000, vanillaIdx.length);
const tBs = time(
  () => {
    let s = 0;
    for (let j = 0; j < nBs; j++) {
      const i = vanillaIdx[j]!;
      s += bs.blackScholes(
        book.spot[i]!,
        book.strike[i]!,
        book.tau[i]!,
        book.vol[i]!,
        book.rate[i]!,
        book.right[i] === 0 ? 'call' : 'put',
      );
    }
    sink += s;
  },
  1,
  5,
);
rows.push({ name: 'npm black-scholes', what: 'price only', n: nBs, sec: tBs });

const nGk = Math.min(10_000, vanillaIdx.length);
const tGk = time(
  () => {
    let s = 0;
    for (let j = 0; j < nGk; j++) {
      const i = vanillaIdx[j]!;
      const a = [book.spot[i]!, book.strike[i]!, book.tau[i]!, book.vol[i]!, book.rate[i]!] as const;
      const cp = book.right[i] === 0 ? 'call' : 'put';
      s +=
        bs.blackScholes(...a, cp) +
        gk.getDelta(...a, cp) +
        gk.getGamma(...a) +
        gk.getVega(...a) +
        gk.getTheta(...a, cp) +
        gk.getRho(...a, cp);
    }
    sink += s;
  },
  1,
  5,
);
rows.push({ name: 'npm black-scholes + greeks', what: 'price + 5 Greeks', n: nGk, sec: tGk });

const wallRate = (r: (typeof rows)[number]): number => r.n / r.sec.wall;
const cpuRate = (r: (typeof rows)[number]): number => r.n / r.sec.cpu;
const batch = rows[0]!;
const fmt = (x: number): string => (x >= 1e6 ? `${(x / 1e6).toFixed(2)} M` : `${(x / 1e3).toFixed(1)} k`);
const ratio = (x: number): string => (x < 10 ? x.toFixed(2) : x.toFixed(0));
process.stdout.write(
  `node ${process.version}, one core, ${N.toLocaleString('en-US')} options (60% vanilla, 20% cash, 20% asset digitals), median of repeats; load average ${loadavg()
    .map((x) => x.toFixed(1))
    .join(' ')}\n`,
);
process.stdout.write(
  `${'method'.padEnd(31)}${'computes'.padEnd(17)}${'options'.padStart(10)}${'wall s'.padStart(9)}${'revals/s'.padStart(10)}${'revals/cpu-s'.padStart(14)}${'batch is'.padStart(10)}\n`,
);
for (const r of rows) {
  process.stdout.write(
    `${r.name.padEnd(31)}${r.what.padEnd(17)}${r.n.toLocaleString('en-US').padStart(10)}${r.sec.wall.toFixed(4).padStart(9)}${fmt(wallRate(r)).padStart(10)}${fmt(cpuRate(r)).padStart(14)}${ratio(cpuRate(batch) / cpuRate(r)).padStart(8)} x\n`,
  );
}
process.stdout.write(
  '(ratios on CPU time; "best 100k slice" is the fastest of 60 slices, wall clock; the npm packages value vanilla options without dividends only)\n',
);
process.stdout.write(
  `non-finite outputs in the batch: ${bad}; target >= 5 M revals/s per core: median ${cpuRate(batch) >= 5e6 ? 'met' : 'NOT met'} (${fmt(cpuRate(batch))} per CPU-second, ${fmt(wallRate(batch))} per wall second), best slice ${fmt(SLICE / bestSlice)}\n`,
);
if (!Number.isFinite(sink) || bad > 0) process.exitCode = 1;
