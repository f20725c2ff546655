import { describe, expect, it } from 'vitest';
import { allocGreeksBatch, allocOptionBatch, priceBatch } from './batch.ts';
import { priceOption } from './bsm.ts';
import type { Payoff, Right } from './types.ts';

const RIGHTS: Right[] = ['call', 'put'];
const PAYOFFS: Payoff[] = ['vanilla', 'cash-digital', 'asset-digital'];

describe('priceBatch', () => {
  it('gives bit-for-bit the object API numbers, for every payoff, right and carry mode', () => {
    const n = 600;
    const b = allocOptionBatch(n);
    for (let i = 0; i < n; i++) {
      b.right[i] = i % 2;
      b.payoff[i] = Math.floor(i / 2) % 3;
      b.spot[i] = 100;
      b.strike[i] = 60 + (i % 17) * 5;
      b.tau[i] = i % 29 === 0 ? 0 : 0.01 + (i % 13) * 0.4;
      b.vol[i] = 0.05 + (i % 7) * 0.1;
      b.rate[i] = 0.04;
      b.carry[i] = (i % 5) * 0.01 - 0.02;
      b.cashAmount[i] = 1 + (i % 3);
      b.rhoCarry[i] = i % 11 === 0 ? 0 : 1;
    }
    const out = allocGreeksBatch(n);
    priceBatch(b, out);
    for (let i = 0; i < n; i++) {
      const g = priceOption({
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
      });
      for (const k of Object.keys(g) as (keyof typeof g)[]) expect(out[k][i], `${k} at ${i}`).toBe(g[k]);
    }
  });

  it('reuses discount factors across runs of equal tau, r, b without changing a bit', () => {
    const n = 60;
    const b = allocOptionBatch(n);
    for (let i = 0; i < n; i++) {
      const group = Math.floor(i / 7); // runs of 7 rows share the expiry and rates
      b.right[i] = i % 2;
      b.payoff[i] = i % 3;
      b.spot[i] = 100;
      b.strike[i] = 80 + i;
      b.tau[i] = group % 3 === 2 ? 0 : 0.1 + group * 0.3;
      b.vol[i] = 0.1 + (i % 5) * 0.05;
      b.rate[i] = 0.01 * (group % 4);
      b.carry[i] = 0.005 * (group % 3);
    }
    const out = allocGreeksBatch(n);
    priceBatch(b, out);
    const single = allocGreeksBatch(n);
    for (let i = 0; i < n; i++) priceBatch(b, single, i, i + 1); // every row alone: nothing reused
    for (const k of Object.keys(out) as (keyof typeof out)[]) expect([...out[k]]).toEqual([...single[k]]);
  });

  it('prices only the asked range and checks it', () => {
    const b = allocOptionBatch(4);
    b.spot.fill(100);
    b.strike.fill(100);
    b.tau.fill(1);
    b.vol.fill(0.2);
    const out = allocGreeksBatch(4);
    out.price.fill(-1);
    priceBatch(b, out, 1, 3);
    expect([...out.price].map((x) => x > 0)).toEqual([false, true, true, false]);
    expect(out.price[0]).toBe(-1);
    expect(() => priceBatch(b, out, 2, 5)).toThrow(/outside/);
    expect(() => priceBatch(b, allocGreeksBatch(2), 0, 4)).toThrow(/holds 2 rows/);
  });

  it('allocates with the documented defaults: call, vanilla, cash 1, b moves with r', () => {
    const b = allocOptionBatch(3);
    expect([...b.right, ...b.payoff]).toEqual([0, 0, 0, 0, 0, 0]);
    expect([...b.cashAmount]).toEqual([1, 1, 1]);
    expect([...b.rhoCarry]).toEqual([1, 1, 1]);
  });
});
