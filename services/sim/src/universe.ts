/**
 * The invented scenario: desks and books, a few hundred made-up underlyings (equities, indices,
 * index futures, FX pairs) and five currency curves. Every name here is invented for the demo.
 */
import { Rng } from './rng.ts';

export const REPORTING_CURRENCY = 'USD';
export const CURRENCIES = ['USD', 'EUR', 'GBP', 'JPY', 'CHF'] as const;
export type Currency = (typeof CURRENCIES)[number];

/** Invented desks, each with the books under it and what it trades. */
export const DESKS = [
  { desk: 'ORCHARD', books: ['ORCHARD-INDEX', 'ORCHARD-SINGLES', 'ORCHARD-EUROPE', 'ORCHARD-ASIA'] },
  { desk: 'QUAYSIDE', books: ['QUAYSIDE-FLOW1', 'QUAYSIDE-FLOW2', 'QUAYSIDE-HEDGE'] },
  { desk: 'LIGHTHOUSE', books: ['LIGHTHOUSE-G10', 'LIGHTHOUSE-CROSS'] },
  { desk: 'FOUNDRY', books: ['FOUNDRY-FUT', 'FOUNDRY-OPT'] },
] as const;

export interface BookRef {
  desk: string;
  book: string;
}

export type SimKind = 'equity' | 'index' | 'future' | 'fx';

export interface SimUnderlying {
  name: string;
  /** contract kind: indices are equities with a continuous yield and no discrete dividends */
  kind: 'equity' | 'future' | 'fx';
  simKind: SimKind;
  currency: Currency;
  /** base currency of an FX pair */
  base?: Currency;
  /** sector factor the name loads on ('' for none) */
  sector: string;
  /** +1 or -1: direction of the sector factor's effect (USD strength lowers EURUSD, lifts USDJPY) */
  sectorSign: number;
  marketLoading: number;
  sectorLoading: number;
  /** diffusion vol of the spot, also the surface's long-dated ATM level */
  vol: number;
  /** short-dated ATM vol premium over `vol` (term structure) */
  shortVolPremium: number;
  /** smile: vol change per unit of log-moneyness / sqrt(T) (negative = put skew) */
  skew: number;
  /** smile curvature */
  smile: number;
  dividendYield: number;
  /** discrete dividends as offsets from the start, in ms, and cash amounts */
  dividends: { offsetMs: number; amount: number }[];
  initialSpot: number;
  /** probability that it ticks on a given tick interval (liquidity) */
  tickProbability: number;
  /** how many decimals its prices are quoted with */
  priceDecimals: number;
  strikeStep: number;
  /** jumps per (market) day; equities only */
  jumpsPerDay: number;
  /** index whose price a future tracks, and the future's delivery offset from the start */
  tracks?: string;
  deliveryOffsetMs?: number;
  /** the books that trade it, and its share of the trade flow */
  books: BookRef[];
  popularity: number;
  /** contract multiplier of its listed options, and typical position size */
  optionMultiplier: number;
  lotSize: number;
}

export interface InitialCurve {
  currency: Currency;
  tenors: number[];
  zeroRates: number[];
}

const DAY_MS = 86_400_000;

const TENORS = [0.25, 0.5, 1, 2, 5, 10];
/** Plausible, invented zero-rate levels by currency: short end then long end. */
const RATE_SHAPES: Record<Currency, [number, number]> = {
  USD: [0.043, 0.039],
  EUR: [0.022, 0.026],
  GBP: [0.041, 0.038],
  JPY: [0.004, 0.011],
  CHF: [0.005, 0.008],
};

export function initialCurves(): InitialCurve[] {
  return CURRENCIES.map((currency) => {
    const [short, long] = RATE_SHAPES[currency];
    const zeroRates = TENORS.map((t) => {
      const w = Math.log(1 + t) / Math.log(11);
      return round(short + (long - short) * w, 6);
    });
    return { currency, tenors: [...TENORS], zeroRates };
  });
}

export function round(x: number, decimals: number): number {
  const f = 10 ** decimals;
  return Math.round(x * f) / f;
}

const SYLLABLES = [
  'KA',
  'LO',
  'VI',
  'RE',
  'TAN',
  'MOR',
  'BEL',
  'SU',
  'DRA',
  'NO',
  'QUI',
  'ZEL',
  'PA',
  'TRO',
  'FEN',
  'GA',
  'HU',
  'JIN',
  'OSK',
  'WEL',
  'YAR',
  'CRE',
  'MI',
  'VOS',
  'ELD',
  'BRI',
  'LUM',
  'SEV',
];

const SECTORS = ['TECH', 'ENERGY', 'HEALTH', 'BANKS', 'RETAIL', 'INDUSTRY', 'UTILITY', 'MINING'];

/** Where an equity of each currency is booked, and the share of equities in that currency. */
const EQUITY_CURRENCY_MIX: [Currency, number][] = [
  ['USD', 0.6],
  ['EUR', 0.15],
  ['GBP', 0.1],
  ['JPY', 0.1],
  ['CHF', 0.05],
];

const INDICES: { name: string; currency: Currency; spot: number; vol: number; yield: number }[] = [
  { name: 'HARBOR500', currency: 'USD', spot: 5200, vol: 0.17, yield: 0.014 },
  { name: 'ORBIT100', currency: 'USD', spot: 18100, vol: 0.21, yield: 0.007 },
  { name: 'TIDEWAY50', currency: 'EUR', spot: 4900, vol: 0.18, yield: 0.03 },
  { name: 'KAZEN225', currency: 'JPY', spot: 38500, vol: 0.2, yield: 0.018 },
];

const FX_PAIRS: {
  name: string;
  base: Currency;
  quote: Currency;
  spot: number;
  vol: number;
  usdSign: number;
}[] = [
  { name: 'EURUSD', base: 'EUR', quote: 'USD', spot: 1.085, vol: 0.075, usdSign: -1 },
  { name: 'GBPUSD', base: 'GBP', quote: 'USD', spot: 1.27, vol: 0.08, usdSign: -1 },
  { name: 'USDJPY', base: 'USD', quote: 'JPY', spot: 149.5, vol: 0.095, usdSign: 1 },
  { name: 'USDCHF', base: 'USD', quote: 'CHF', spot: 0.885, vol: 0.08, usdSign: 1 },
  { name: 'EURGBP', base: 'EUR', quote: 'GBP', spot: 0.855, vol: 0.055, usdSign: 0 },
  { name: 'EURJPY', base: 'EUR', quote: 'JPY', spot: 162.2, vol: 0.1, usdSign: 0 },
];

/** The fixed core of the universe: FX pairs, indices and one future on each of three indices. */
export const CORE_UNDERLYINGS = FX_PAIRS.length + INDICES.length + 3;

const ORCHARD = DESKS[0];
const QUAYSIDE = DESKS[1];
const LIGHTHOUSE = DESKS[2];
const FOUNDRY = DESKS[3];
const ref = (desk: { desk: string }, book: string): BookRef => ({ desk: desk.desk, book });

export interface UniverseOptions {
  underlyings: number;
  marketLoading: number;
  sectorLoading: number;
  jumpsPerDay: number;
  tickProbability?: number;
}

/** A loading of exactly 0 stays 0, so a caller can switch a factor off entirely. */
function jitter(rng: Rng, x: number, spread: number): number {
  const shift = rng.between(-spread, spread);
  if (x === 0) return 0;
  return Math.min(Math.max(x + shift, 0), 0.98);
}

export function buildUniverse(rng: Rng, opts: UniverseOptions): SimUnderlying[] {
  const out: SimUnderlying[] = [];
  const tick = (p: number) => opts.tickProbability ?? p;
  for (const fx of FX_PAIRS) {
    out.push({
      name: fx.name,
      kind: 'fx',
      simKind: 'fx',
      currency: fx.quote,
      base: fx.base,
      sector: fx.usdSign === 0 ? '' : 'USD',
      sectorSign: fx.usdSign === 0 ? 1 : fx.usdSign,
      marketLoading: 0.1,
      sectorLoading: fx.usdSign === 0 ? 0 : 0.6,
      vol: fx.vol,
      shortVolPremium: 0.005,
      skew: -0.02,
      smile: 0.15,
      dividendYield: 0,
      dividends: [],
      initialSpot: fx.spot,
      tickProbability: tick(0.9),
      priceDecimals: fx.spot > 20 ? 3 : 5,
      strikeStep: fx.spot > 20 ? 0.5 : 0.005,
      jumpsPerDay: 0,
      books: [ref(LIGHTHOUSE, fx.usdSign === 0 ? 'LIGHTHOUSE-CROSS' : 'LIGHTHOUSE-G10')],
      popularity: 3,
      optionMultiplier: 1,
      lotSize: 1_000_000,
    });
  }
  for (const ix of INDICES) {
    out.push({
      name: ix.name,
      kind: 'equity',
      simKind: 'index',
      currency: ix.currency,
      sector: '',
      sectorSign: 1,
      marketLoading: 0.95,
      sectorLoading: 0,
      vol: ix.vol,
      shortVolPremium: 0.02,
      skew: -0.12,
      smile: 0.3,
      dividendYield: ix.yield,
      dividends: [],
      initialSpot: ix.spot,
      tickProbability: tick(1),
      priceDecimals: 2,
      strikeStep: ix.spot > 10_000 ? 250 : 25,
      jumpsPerDay: 0,
      books: [
        ref(ORCHARD, ix.currency === 'JPY' ? 'ORCHARD-ASIA' : 'ORCHARD-INDEX'),
        ref(QUAYSIDE, 'QUAYSIDE-FLOW1'),
      ],
      popularity: 6,
      optionMultiplier: 10,
      lotSize: 20,
    });
  }
  for (const ix of INDICES.slice(0, 3)) {
    // Quarterly delivery about three months out: the future tracks its index at carry r - q.
    out.push({
      name: `${ix.name}-FUT`,
      kind: 'future',
      simKind: 'future',
      currency: ix.currency,
      sector: '',
      sectorSign: 1,
      marketLoading: 0.95,
      sectorLoading: 0,
      vol: ix.vol,
      shortVolPremium: 0.02,
      skew: -0.12,
      smile: 0.3,
      dividendYield: 0,
      dividends: [],
      initialSpot: ix.spot,
      tickProbability: tick(1),
      priceDecimals: 2,
      strikeStep: ix.spot > 10_000 ? 250 : 25,
      jumpsPerDay: 0,
      tracks: ix.name,
      deliveryOffsetMs: 95 * DAY_MS,
      books: [ref(FOUNDRY, 'FOUNDRY-FUT'), ref(FOUNDRY, 'FOUNDRY-OPT')],
      popularity: 4,
      optionMultiplier: 50,
      lotSize: 10,
    });
  }
  const used = new Set(out.map((u) => u.name));
  const equities = Math.max(0, opts.underlyings - out.length);
  const mixWeights = EQUITY_CURRENCY_MIX.map(([, w]) => w);
  for (let i = 0; i < equities; i++) {
    let name = '';
    do {
      const parts = rng.int(2, 3);
      name = '';
      for (let p = 0; p < parts; p++) name += rng.pick(SYLLABLES);
    } while (used.has(name) || name.length > 9);
    used.add(name);
    const currency = (EQUITY_CURRENCY_MIX[rng.weightedIndex(mixWeights)] ?? ['USD'])[0];
    const level = currency === 'JPY' ? 100 * Math.exp(rng.between(2, 4.5)) : Math.exp(rng.between(2.5, 6));
    const spot = round(level, 2);
    const hasDividends = rng.chance(0.35);
    const dividends: { offsetMs: number; amount: number }[] = [];
    if (hasDividends) {
      // Quarterly payers: four ex-dates over the year, first within the quarter.
      const first = rng.int(5, 90);
      const amount = round(spot * rng.between(0.003, 0.008), 2);
      for (let q = 0; q < 4; q++)
        dividends.push({ offsetMs: (first + 91 * q) * DAY_MS, amount: Math.max(amount, 0.01) });
    }
    const books: BookRef[] =
      currency === 'USD'
        ? [
            ref(QUAYSIDE, rng.chance(0.5) ? 'QUAYSIDE-FLOW1' : 'QUAYSIDE-FLOW2'),
            ref(QUAYSIDE, 'QUAYSIDE-HEDGE'),
            ref(ORCHARD, 'ORCHARD-SINGLES'),
          ]
        : currency === 'JPY'
          ? [ref(ORCHARD, 'ORCHARD-ASIA'), ref(QUAYSIDE, 'QUAYSIDE-HEDGE')]
          : [ref(ORCHARD, 'ORCHARD-EUROPE'), ref(QUAYSIDE, 'QUAYSIDE-HEDGE')];
    out.push({
      name,
      kind: 'equity',
      simKind: 'equity',
      currency,
      sector: rng.pick(SECTORS),
      sectorSign: 1,
      marketLoading: jitter(rng, opts.marketLoading, 0.1),
      sectorLoading: jitter(rng, opts.sectorLoading, 0.1),
      vol: round(rng.between(0.18, 0.55), 3),
      shortVolPremium: round(rng.between(0, 0.06), 3),
      skew: round(-rng.between(0.05, 0.2), 3),
      smile: round(rng.between(0.1, 0.5), 3),
      dividendYield: hasDividends ? 0 : round(rng.chance(0.5) ? rng.between(0.005, 0.035) : 0, 4),
      dividends,
      initialSpot: spot,
      tickProbability: tick(round(rng.between(0.15, 0.6), 2)),
      priceDecimals: 2,
      strikeStep: spot < 25 ? 0.5 : spot < 200 ? 1 : spot < 1000 ? 5 : 50,
      jumpsPerDay: opts.jumpsPerDay,
      books,
      // A few names draw most of the flow, as on any desk (a Zipf-like tail).
      popularity: 1 / (1 + i / 20),
      optionMultiplier: 100,
      lotSize: 10,
    });
  }
  // Factor loadings must leave room for the idiosyncratic part.
  for (const u of out) {
    const total = u.marketLoading ** 2 + u.sectorLoading ** 2;
    if (total > 0.97) {
      const f = Math.sqrt(0.97 / total);
      u.marketLoading *= f;
      u.sectorLoading *= f;
    }
  }
  return out;
}
