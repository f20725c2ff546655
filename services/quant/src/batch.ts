// Struct-of-arrays pricer for the engine's hot path: no objects, no allocation, one monomorphic
// call per option. The caller owns validation (spot, strike, vol > 0; everything finite); the
// engine's inputs have passed the contract's schemas by the time they get here.

import { valueRange } from './kernel.ts';
import type { GreeksBatch, OptionBatch } from './types.ts';

export function allocOptionBatch(n: number): OptionBatch {
  const cashAmount = new Float64Array(n).fill(1);
  return {
    n,
    right: new Uint8Array(n),
    payoff: new Uint8Array(n),
    spot: new Float64Array(n),
    strike: new Float64Array(n),
    tau: new Float64Array(n),
    vol: new Float64Array(n),
    rate: new Float64Array(n),
    carry: new Float64Array(n),
    cashAmount,
    rhoCarry: new Uint8Array(n).fill(1),
  };
}

export function allocGreeksBatch(n: number): GreeksBatch {
  return {
    price: new Float64Array(n),
    delta: new Float64Array(n),
    gamma: new Float64Array(n),
    vega: new Float64Array(n),
    theta: new Float64Array(n),
    rho: new Float64Array(n),
    vanna: new Float64Array(n),
    volga: new Float64Array(n),
    charm: new Float64Array(n),
  };
}

/** Value options [from, to) of `b` into the same indices of `out` (defaults: the whole batch). */
export function priceBatch(b: OptionBatch, out: GreeksBatch, from = 0, to = b.n): void {
  if (from < 0 || to > b.n || from > to)
    throw new RangeError(`batch range [${from}, ${to}) is outside [0, ${b.n})`);
  if (out.price.length < to)
    throw new RangeError(`output batch holds ${out.price.length} rows, range ends at ${to}`);
  valueRange(b, out, from, to);
}
