// Distinct instruments in struct-of-arrays form: each is priced once per revaluation and the
// per-unit results are scaled by the positions on it.
import type { OptionInstrument, LinearInstrument } from '@keelson/shared-types';
import { msOf } from './time.ts';

export const PRICED = -1;
export const R_NO_REFERENCE = 0;
export const R_NO_SPOT = 1;
export const R_NO_CURVE = 2;
export const R_NO_VOL = 3;
export const R_NO_FX = 4;
/** Holding state for "no live trade left": contributes nothing, counts nowhere. */
export const EMPTY = -2;

const RIGHT_CODE = { call: 0, put: 1 } as const;
const PAYOFF_CODE = { vanilla: 0, 'cash-digital': 1, 'asset-digital': 2 } as const;

export class InstrumentTable {
  count = 0;
  private cap = 0;
  /** underlying index in the engine's underlying table */
  underlying = new Int32Array(0);
  isOption = new Uint8Array(0);
  right = new Uint8Array(0);
  payoff = new Uint8Array(0);
  strike = new Float64Array(0);
  expiryMs = new Float64Array(0);
  cashAmount = new Float64Array(0);
  // results of the last revaluation, per unit, in the underlying's currency
  status = new Int8Array(0);
  /** index into TENORS; -1 for linear */
  tenor = new Int8Array(0);
  /** linear position on a future: pv = q m (F - trade price), not q m F */
  futureLinear = new Uint8Array(0);
  price = new Float64Array(0);
  delta = new Float64Array(0);
  gamma = new Float64Array(0);
  vega = new Float64Array(0);
  theta = new Float64Array(0);
  rho = new Float64Array(0);
  /** the quoted spot (not S*) the cash metrics use */
  spot = new Float64Array(0);
  /** input sequence of the last time it was put in a dirty set (dedupes a dirty set) */
  dirtySeq = new Float64Array(0);
  /** valuation time of the last revaluation (NaN before the first) */
  valuedAt = new Float64Array(0);
  private readonly byKey = new Map<string, number>();

  key(underlying: string, ins: OptionInstrument | LinearInstrument): string {
    if (ins.kind === 'linear') return `${underlying}|linear`;
    return `${underlying}|option|${ins.right}|${ins.payoff}|${ins.strike}|${msOf(ins.expiry)}|${ins.cashAmount ?? 1}`;
  }

  find(key: string): number | undefined {
    return this.byKey.get(key);
  }

  add(key: string, underlyingIdx: number, ins: OptionInstrument | LinearInstrument): number {
    if (this.count === this.cap) this.grow(Math.max(64, this.cap * 2));
    const i = this.count++;
    this.underlying[i] = underlyingIdx;
    if (ins.kind === 'option') {
      this.isOption[i] = 1;
      this.right[i] = RIGHT_CODE[ins.right];
      this.payoff[i] = PAYOFF_CODE[ins.payoff];
      this.strike[i] = ins.strike;
      this.expiryMs[i] = msOf(ins.expiry);
      this.cashAmount[i] = ins.cashAmount ?? 1;
      this.tenor[i] = 0;
    } else {
      this.isOption[i] = 0;
      this.tenor[i] = -1;
    }
    this.status[i] = R_NO_REFERENCE;
    this.dirtySeq[i] = -1;
    this.valuedAt[i] = Number.NaN;
    this.byKey.set(key, i);
    return i;
  }

  private grow(cap: number): void {
    const g = <T extends Int32Array | Uint8Array | Int8Array | Float64Array>(
      a: T,
      C: new (n: number) => T,
    ): T => {
      const b = new C(cap);
      b.set(a);
      return b;
    };
    this.underlying = g(this.underlying, Int32Array);
    this.isOption = g(this.isOption, Uint8Array);
    this.right = g(this.right, Uint8Array);
    this.payoff = g(this.payoff, Uint8Array);
    this.strike = g(this.strike, Float64Array);
    this.expiryMs = g(this.expiryMs, Float64Array);
    this.cashAmount = g(this.cashAmount, Float64Array);
    this.status = g(this.status, Int8Array);
    this.tenor = g(this.tenor, Int8Array);
    this.futureLinear = g(this.futureLinear, Uint8Array);
    this.price = g(this.price, Float64Array);
    this.delta = g(this.delta, Float64Array);
    this.gamma = g(this.gamma, Float64Array);
    this.vega = g(this.vega, Float64Array);
    this.theta = g(this.theta, Float64Array);
    this.rho = g(this.rho, Float64Array);
    this.spot = g(this.spot, Float64Array);
    this.dirtySeq = g(this.dirtySeq, Float64Array);
    this.valuedAt = g(this.valuedAt, Float64Array);
    this.cap = cap;
  }
}

/** Payoff at expiry on the quoted spot; at the money (S = K) a digital does not pay. */
export function intrinsic(right: number, payoff: number, s: number, k: number, cash: number): number {
  const itm = right === 0 ? s > k : s < k;
  if (payoff === 1) return itm ? cash : 0;
  if (payoff === 2) return itm ? s : 0;
  return right === 0 ? Math.max(s - k, 0) : Math.max(k - s, 0);
}
