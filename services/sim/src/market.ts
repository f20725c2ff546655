/**
 * The simulated market: spots under the risk-neutral measure with a two-factor correlation
 * structure and rare jumps, an ATM-vol level per name that moves against its spot, surfaces
 * built from a smile model, and zero curves that shift now and then.
 */
import type { OptionQuote } from './pricing.ts';
import { Rng } from './rng.ts';
import {
  CURRENCIES,
  initialCurves,
  round,
  type Currency,
  type InitialCurve,
  type SimUnderlying,
} from './universe.ts';

export const MS_PER_YEAR = 365 * 86_400_000;

export type SurfaceMode = 'sticky-strike' | 'sticky-moneyness';

/** Strike grids as fractions of the initial spot: wide for equities, narrower for FX. */
const EQUITY_MONEYNESS = [0.5, 0.6, 0.7, 0.8, 0.85, 0.9, 0.95, 1, 1.05, 1.1, 1.15, 1.2, 1.3, 1.5, 1.75, 2];
const FX_MONEYNESS = [0.85, 0.9, 0.95, 0.975, 1, 1.025, 1.05, 1.1, 1.15];

/** The vol level mean-reverts (per year) and moves against spot (leverage effect). */
const VOL_LEVEL_REVERSION = 5;
const VOL_OF_VOL = 0.8;
const SPOT_VOL_CORRELATION = { equity: -0.7, fx: -0.2 };
/** Jump size in log terms: mean and standard deviation (crashes a little more likely than pops). */
export const JUMP_MEAN = -0.01;
export const JUMP_SD = 0.04;

export interface Curve {
  currency: Currency;
  tenors: number[];
  zeroRates: number[];
}

/** Zero rate at tau: linear between tenors, flat outside (the contract's rule). */
export function zeroRate(
  c: { tenors: readonly number[]; zeroRates: readonly number[] },
  tau: number,
): number {
  const n = c.tenors.length;
  const first = c.tenors[0] ?? 0;
  if (tau <= first) return c.zeroRates[0] ?? 0;
  for (let i = 1; i < n; i++) {
    const t1 = c.tenors[i] ?? 0;
    if (tau <= t1) {
      const t0 = c.tenors[i - 1] ?? 0;
      const r0 = c.zeroRates[i - 1] ?? 0;
      const r1 = c.zeroRates[i] ?? 0;
      return r0 + ((r1 - r0) * (tau - t0)) / (t1 - t0);
    }
  }
  return c.zeroRates[n - 1] ?? 0;
}

export interface FactorConfig {
  marketSpeed: number;
}

/** Friday 20:00 UTC on or after the given day (a listed-expiry convention in our scenario). */
function fridayClose(ms: number): number {
  const d = new Date(ms);
  const day = d.getUTCDay();
  const add = (5 - day + 7) % 7;
  return Date.UTC(d.getUTCFullYear(), d.getUTCMonth(), d.getUTCDate() + add, 20);
}

/** Third Friday of the month, 20:00 UTC. */
function thirdFriday(year: number, month: number): number {
  const first = fridayClose(Date.UTC(year, month, 1));
  return first + 14 * 86_400_000;
}

/** The pillar expiries every surface lists: next week's Friday, then monthly and quarterly dates. */
export function pillarExpiries(startMs: number): number[] {
  const out: number[] = [];
  const weekly = fridayClose(startMs + 3 * 86_400_000);
  out.push(weekly);
  const d = new Date(startMs);
  for (const k of [1, 2, 3, 6, 9, 12, 18, 24]) {
    const e = thirdFriday(d.getUTCFullYear(), d.getUTCMonth() + k);
    if (e > (out.at(-1) ?? 0)) out.push(e);
  }
  return out;
}

export class Market {
  readonly logSpot: Float64Array;
  readonly logVolLevel: Float64Array;
  readonly curves: Map<Currency, Curve>;
  private readonly baseCurves: Map<Currency, InitialCurve>;
  /** index of each name, and for futures the index of the name they track */
  readonly indexOf = new Map<string, number>();
  private readonly trackIndex: Int32Array;
  private readonly nextDividend: Int32Array;
  private readonly sectorIds: Int32Array;
  private readonly sectorCount: number;
  private readonly sectorShocks: Float64Array;
  /** spot and vol level when each surface was last published (sticky rules and refresh triggers) */
  readonly surfaceRefSpot: Float64Array;
  readonly surfaceRefLogVol: Float64Array;
  readonly strikes: number[][];
  readonly expiries: number[];
  /** the pillar expiries as contract timestamps, formatted once (surfaces repeat them) */
  readonly expiryIsos: readonly string[];
  lastDiffusionMs: number;
  /** standardized diffusion shocks of the last step, kept for the statistics tests */
  readonly lastShocks: Float64Array;

  constructor(
    readonly universe: readonly SimUnderlying[],
    readonly startMs: number,
    readonly mode: SurfaceMode,
    private readonly speed: number,
  ) {
    const n = universe.length;
    this.logSpot = new Float64Array(n);
    this.logVolLevel = new Float64Array(n);
    this.trackIndex = new Int32Array(n).fill(-1);
    this.nextDividend = new Int32Array(n);
    this.sectorIds = new Int32Array(n).fill(-1);
    this.surfaceRefSpot = new Float64Array(n);
    this.surfaceRefLogVol = new Float64Array(n);
    this.lastShocks = new Float64Array(n);
    const sectors = new Map<string, number>();
    universe.forEach((u, i) => {
      this.indexOf.set(u.name, i);
      this.logSpot[i] = Math.log(u.initialSpot);
      if (u.sector !== '') {
        if (!sectors.has(u.sector)) sectors.set(u.sector, sectors.size);
        this.sectorIds[i] = sectors.get(u.sector) ?? -1;
      }
    });
    this.sectorCount = sectors.size;
    this.sectorShocks = new Float64Array(this.sectorCount);
    universe.forEach((u, i) => {
      if (u.tracks !== undefined) this.trackIndex[i] = this.indexOf.get(u.tracks) ?? -1;
    });
    this.baseCurves = new Map(initialCurves().map((c) => [c.currency, c]));
    this.curves = new Map(
      initialCurves().map((c) => [
        c.currency,
        { currency: c.currency, tenors: c.tenors, zeroRates: [...c.zeroRates] },
      ]),
    );
    this.expiries = pillarExpiries(startMs);
    this.expiryIsos = this.expiries.map((e) => new Date(e).toISOString());
    this.strikes = universe.map((u) => strikeGrid(u));
    this.lastDiffusionMs = startMs;
    universe.forEach((_, i) => {
      this.surfaceRefSpot[i] = this.spot(i);
      this.surfaceRefLogVol[i] = 0;
    });
  }

  curve(ccy: Currency): Curve {
    const c = this.curves.get(ccy);
    if (c === undefined) throw new Error(`no curve for ${ccy}`);
    return c;
  }

  /** The short rate that drives the drift: the curve's rate at its first tenor. */
  shortRate(ccy: Currency): number {
    return zeroRate(this.curve(ccy), 0);
  }

  /** The quoted price: spot, FX rate, or for a future its index carried to delivery. */
  spot(i: number): number {
    const u = this.universe[i];
    if (u === undefined) throw new RangeError(`no underlying #${i}`);
    const track = this.trackIndex[i] ?? -1;
    if (track >= 0) {
      const ix = this.universe[track];
      const idxSpot = Math.exp(this.logSpot[track] ?? 0);
      if (ix === undefined) return idxSpot;
      const tau = Math.max(
        (this.startMs + (u.deliveryOffsetMs ?? 0) - this.lastDiffusionMs) / MS_PER_YEAR,
        0,
      );
      const r = zeroRate(this.curve(ix.currency), tau);
      return idxSpot * Math.exp((r - ix.dividendYield) * tau);
    }
    return Math.exp(this.logSpot[i] ?? 0);
  }

  /** Risk-neutral drift of log S before the Ito and jump terms: r - q, r_quote - r_base, or 0. */
  carry(u: SimUnderlying): number {
    switch (u.simKind) {
      case 'fx':
        return this.shortRate(u.currency) - this.shortRate(u.base ?? u.currency);
      case 'future':
        return 0;
      default:
        return this.shortRate(u.currency) - u.dividendYield;
    }
  }

  /**
   * Advance every latent price to toMs (elapsed wall time times the market speed). Futures are
   * not simulated: they follow their index. Dividends going ex in the interval are paid.
   */
  diffuse(rng: Rng, toMs: number): void {
    const dtMs = toMs - this.lastDiffusionMs;
    if (dtMs <= 0) return;
    const dt = (dtMs / MS_PER_YEAR) * this.speed;
    const sqrtDt = Math.sqrt(dt);
    const market = rng.normal();
    for (let s = 0; s < this.sectorCount; s++) this.sectorShocks[s] = rng.normal();
    const n = this.universe.length;
    for (let i = 0; i < n; i++) {
      const u = this.universe[i] as SimUnderlying;
      if (u.simKind === 'future') continue; // follows its index
      const sector = this.sectorIds[i] ?? -1;
      const a = u.marketLoading;
      const b = sector >= 0 ? u.sectorLoading : 0;
      const idio = Math.sqrt(Math.max(1 - a * a - b * b, 0));
      const sectorShock = sector >= 0 ? (this.sectorShocks[sector] ?? 0) * u.sectorSign : 0;
      const z = a * market + b * sectorShock + idio * rng.normal();
      this.lastShocks[i] = z;
      const lambda = u.jumpsPerDay * 365; // per year of market time
      const jumpComp = lambda * (Math.exp(JUMP_MEAN + 0.5 * JUMP_SD * JUMP_SD) - 1);
      let x = (this.carry(u) - 0.5 * u.vol * u.vol - jumpComp) * dt + u.vol * sqrtDt * z;
      if (lambda > 0) {
        const jumps = rng.poisson(lambda * dt);
        if (jumps > 0) x += jumps * JUMP_MEAN + Math.sqrt(jumps) * JUMP_SD * rng.normal();
      }
      this.logSpot[i] = (this.logSpot[i] ?? 0) + x;
      // Vol level: mean-reverting in log, correlated with the spot's shock.
      const rho = u.simKind === 'fx' ? SPOT_VOL_CORRELATION.fx : SPOT_VOL_CORRELATION.equity;
      const w = rho * z + Math.sqrt(1 - rho * rho) * rng.normal();
      const lv = this.logVolLevel[i] ?? 0;
      this.logVolLevel[i] = lv - VOL_LEVEL_REVERSION * lv * dt + VOL_OF_VOL * sqrtDt * w;
    }
    this.lastDiffusionMs = toMs;
    this.payDividends(toMs);
  }

  /** On an ex-date the share price drops by the dividend (floored so it stays positive). */
  private payDividends(toMs: number): void {
    this.universe.forEach((u, i) => {
      let k = this.nextDividend[i] ?? 0;
      while (k < u.dividends.length) {
        const d = u.dividends[k];
        if (d === undefined || this.startMs + d.offsetMs > toMs) break;
        const s = Math.exp(this.logSpot[i] ?? 0);
        this.logSpot[i] = Math.log(Math.max(s - d.amount, s * 0.5));
        k++;
      }
      this.nextDividend[i] = k;
    });
  }

  shockVolLevel(i: number, logShock: number): void {
    this.logVolLevel[i] = (this.logVolLevel[i] ?? 0) + logShock;
  }

  /** Model vol of name i at strike K and time to expiry tau, around reference spot refSpot. */
  modelVol(i: number, strike: number, tau: number, refSpot: number): number {
    return this.smileAt(i, tau, refSpot)(strike);
  }

  /**
   * The smile of one expiry as a function of strike: ATM level, forward and scale are computed
   * once per expiry, since a surface asks for many strikes at each.
   */
  private smileAt(i: number, tau: number, refSpot: number): (strike: number) => number {
    const u = this.universe[i] as SimUnderlying;
    const t = Math.max(tau, 1 / 365);
    const level = Math.exp(this.logVolLevel[i] ?? 0);
    const atm = level * (u.vol + u.shortVolPremium * Math.exp(-t / 0.25));
    const fwd = refSpot * Math.exp(this.carry(u) * t);
    const scale = 1 / Math.sqrt(Math.max(t, 1 / 52));
    return (strike) => {
      const raw = Math.log(strike / fwd) * scale;
      // Saturate the wings so that far strikes on short expiries stay plausible.
      const x = 2.5 * Math.tanh(raw / 2.5);
      const v = atm * (1 + u.skew * x + u.smile * x * x);
      return Math.min(Math.max(v, 0.03), 3);
    };
  }

  /** The reference spot a surface is built around: fixed for sticky-strike, current otherwise. */
  referenceSpot(i: number): number {
    return this.mode === 'sticky-strike' ? (this.universe[i]?.initialSpot ?? 1) : this.spot(i);
  }

  /** Vol grid for publication at nowMs (rows: pillar expiries; columns: strikes). */
  surfaceVols(i: number, nowMs: number): number[][] {
    const ref = this.referenceSpot(i);
    const strikes = this.strikes[i] ?? [];
    return this.expiries.map((e) => {
      const smile = this.smileAt(i, (e - nowMs) / MS_PER_YEAR, ref);
      return strikes.map((k) => round(smile(k), 4));
    });
  }

  markSurfacePublished(i: number): void {
    this.surfaceRefSpot[i] = this.spot(i);
    this.surfaceRefLogVol[i] = this.logVolLevel[i] ?? 0;
  }

  /** Whether name i's surface is due again: spot moved (sticky-moneyness) or vol level moved. */
  surfaceDue(i: number): boolean {
    const volMoved = Math.abs((this.logVolLevel[i] ?? 0) - (this.surfaceRefLogVol[i] ?? 0)) > 0.01;
    if (this.mode === 'sticky-strike') return volMoved;
    const spotMoved = Math.abs(Math.log(this.spot(i) / (this.surfaceRefSpot[i] ?? 1))) > 0.005;
    return spotMoved || volMoved;
  }

  /** A curve move: parallel shift and twist, pulled back toward the base shape so it never drifts off. */
  moveCurve(rng: Rng, ccy: Currency): Curve {
    const c = this.curve(ccy);
    const base = this.baseCurves.get(ccy);
    const parallel = rng.normal() * 0.0003;
    const twist = rng.normal() * 0.0001;
    c.zeroRates = c.zeroRates.map((r, k) => {
      const t = c.tenors[k] ?? 1;
      const pull = 0.05 * ((base?.zeroRates[k] ?? r) - r);
      const shape = Math.log(1 + t) / Math.log(11) - 0.5;
      return round(Math.min(Math.max(r + parallel + twist * shape + pull, -0.01), 0.2), 6);
    });
    return c;
  }

  /** Inputs for quoting an option on name i at nowMs (the engine's model, in our own small copy). */
  quoteInputs(
    i: number,
    strike: number,
    expiryMs: number,
    nowMs: number,
  ): Omit<OptionQuote, 'right' | 'payoff'> {
    const u = this.universe[i] as SimUnderlying;
    const tau = (expiryMs - nowMs) / MS_PER_YEAR;
    const quoted = this.spot(i);
    const vol = this.modelVol(i, strike, tau, this.referenceSpot(i));
    if (u.simKind === 'fx') {
      const r = zeroRate(this.curve(u.currency), Math.max(tau, 0));
      const rf = zeroRate(this.curve(u.base ?? u.currency), Math.max(tau, 0));
      return { spot: quoted, strike, tau, vol, rate: r, carry: r - rf };
    }
    const r = zeroRate(this.curve(u.currency), Math.max(tau, 0));
    if (u.simKind === 'future') return { spot: quoted, strike, tau, vol, rate: r, carry: 0 };
    let pvDivs = 0;
    for (const d of u.dividends) {
      const ex = this.startMs + d.offsetMs;
      if (ex > nowMs && ex <= expiryMs) {
        const tD = (ex - nowMs) / MS_PER_YEAR;
        pvDivs += d.amount * Math.exp(-zeroRate(this.curve(u.currency), tD) * tD);
      }
    }
    const adjusted = Math.max(quoted - pvDivs, quoted * 0.01);
    return { spot: adjusted, strike, tau, vol, rate: r, carry: r - u.dividendYield };
  }

  /** Units of USD per unit of ccy, from the simulated FX rates. */
  toUsd(ccy: Currency): number {
    if (ccy === 'USD') return 1;
    const direct = this.indexOf.get(`${ccy}USD`);
    if (direct !== undefined) return this.spot(direct);
    const inverse = this.indexOf.get(`USD${ccy}`);
    if (inverse !== undefined) return 1 / this.spot(inverse);
    throw new Error(`no USD conversion for ${ccy}`);
  }
}

function strikeGrid(u: SimUnderlying): number[] {
  const grid = u.simKind === 'fx' ? FX_MONEYNESS : EQUITY_MONEYNESS;
  const out: number[] = [];
  for (const m of grid) {
    const k = roundToStep(u.initialSpot * m, u.strikeStep);
    if (k > 0 && k > (out.at(-1) ?? 0)) out.push(k);
  }
  return out;
}

export function roundToStep(x: number, step: number): number {
  const decimals = Math.max(0, Math.ceil(-Math.log10(step)) + 1);
  return round(Math.round(x / step) * step, decimals);
}

export { CURRENCIES };
