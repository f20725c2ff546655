// Object API over the shared kernel: validates its inputs (a wrong number here would otherwise
// travel silently into exposures) and returns a fresh Greeks object.

import { allocGreeksBatch, allocOptionBatch } from './batch.ts';
import { valueRange, PAYOFF_ASSET, PAYOFF_CASH, PAYOFF_VANILLA } from './kernel.ts';
import type { Greeks, OptionInputs, Payoff } from './types.ts';

// One-row batch: the object API runs the very loop the batch pricer runs.
const one = allocOptionBatch(1);
const scratch = allocGreeksBatch(1);

function requireFinite(name: string, v: number, positive: boolean): void {
  if (typeof v !== 'number' || !Number.isFinite(v) || (positive && !(v > 0))) {
    throw new RangeError(
      `option ${name} must be a finite number${positive ? ' > 0' : ''} (got ${String(v)})`,
    );
  }
}

export function payoffCode(p: Payoff): number {
  switch (p) {
    case 'vanilla':
      return PAYOFF_VANILLA;
    case 'cash-digital':
      return PAYOFF_CASH;
    case 'asset-digital':
      return PAYOFF_ASSET;
    default:
      throw new RangeError(`option payoff must be vanilla, cash-digital or asset-digital (got ${String(p)})`);
  }
}

export function rightCode(r: OptionInputs['right']): number {
  if (r === 'call') return 0;
  if (r === 'put') return 1;
  throw new RangeError(`option right must be call or put (got ${String(r)})`);
}

/** Throws a RangeError naming the first field outside its domain. */
export function validateOptionInputs(p: OptionInputs): void {
  rightCode(p.right);
  payoffCode(p.payoff);
  requireFinite('spot', p.spot, true);
  requireFinite('strike', p.strike, true);
  requireFinite('tau', p.tau, false);
  if (p.tau > 0) requireFinite('vol', p.vol, true);
  requireFinite('rate', p.rate, false);
  requireFinite('carry', p.carry, false);
  if (p.cashAmount !== undefined) requireFinite('cashAmount', p.cashAmount, true);
}

/** Price and Greeks of one option (units: see Greeks). tau <= 0: intrinsic value, zero Greeks. */
export function priceOption(p: OptionInputs): Greeks {
  validateOptionInputs(p);
  one.right[0] = p.right === 'call' ? 0 : 1;
  one.payoff[0] = payoffCode(p.payoff);
  one.spot[0] = p.spot;
  one.strike[0] = p.strike;
  one.tau[0] = p.tau;
  one.vol[0] = p.vol;
  one.rate[0] = p.rate;
  one.carry[0] = p.carry;
  one.cashAmount[0] = p.cashAmount ?? 1;
  one.rhoCarry[0] = p.rhoCarry === false ? 0 : 1;
  valueRange(one, scratch, 0, 1);
  return {
    price: scratch.price[0]!,
    delta: scratch.delta[0]!,
    gamma: scratch.gamma[0]!,
    vega: scratch.vega[0]!,
    theta: scratch.theta[0]!,
    rho: scratch.rho[0]!,
    vanna: scratch.vanna[0]!,
    volga: scratch.volga[0]!,
    charm: scratch.charm[0]!,
  };
}
