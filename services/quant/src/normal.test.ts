/* eslint-disable no-loss-of-precision -- reference values are kept as the sources print them (17 digits) */
import { describe, expect, it } from 'vitest';
import stdlibCdf from '@stdlib/stats-base-dists-normal-cdf';
import { gaussian, normCdf, normPdf } from './normal.ts';

describe('normCdf against published tables', () => {
  // Abramowitz and Stegun, Handbook of Mathematical Functions (1964), Table 26.1, P(x) to 15
  // decimals. Quoted from memory; every value agrees with the 50-digit table below to the last
  // printed decimal, so the check is the table's half-unit rounding.
  const table26_1: [number, number][] = [
    [0.5, 0.691462461274013],
    [1.0, 0.841344746068543],
    [1.5, 0.933192798731142],
    [2.0, 0.977249868051821],
    [2.5, 0.993790334674224],
    [3.0, 0.99865010196837],
    [4.0, 0.999968328758167],
    [5.0, 0.999999713348428],
  ];
  it.each(table26_1)('P(%f) matches A&S Table 26.1 to 15 decimals', (x, p) => {
    expect(Math.abs(normCdf(x) - p)).toBeLessThanOrEqual(5e-16 + 1e-16);
    expect(Math.abs(normCdf(-x) - (1 - p))).toBeLessThanOrEqual(5e-16 + 1e-16);
  });

  // 50-digit values from the general-purpose arbitrary-precision library mpmath (Python), at the
  // exact double nearest each x:  mpmath.mp.dps = 50; mpmath.ncdf(mpmath.mpf(float(x))).
  // The points straddle Cody's region boundaries (0.67448975, sqrt(32) = 5.65685) and run from
  // the subnormal lower tail to where the upper tail rounds to 1.
  const mpmath: [number, number][] = [
    [-38, 2.8854283600687843e-316],
    [-37.5, 4.6053530095819548e-308],
    [-35, 1.1249107064724062e-268],
    [-30, 4.9067139271481871e-198],
    [-25, 3.0566967063825609e-138],
    [-20, 2.7536241186062337e-89],
    [-15, 3.6709661993127509e-51],
    [-12, 1.776482112077679e-33],
    [-10, 7.6198530241605261e-24],
    [-8, 6.2209605742717841e-16],
    [-7, 1.279812543885835e-12],
    [-6, 9.8658764503769814e-10],
    [-5.657, 7.7020881721776008e-9],
    [-5.656, 7.7470733237490677e-9],
    [-5, 2.8665157187919391e-7],
    [-4, 3.1671241833119921e-5],
    [-3.17, 7.6219468806723519e-4],
    [-3, 1.3498980316300945e-3],
    [-2.5, 6.2096653257761352e-3],
    [-2, 2.2750131948179207e-2],
    [-1.5, 6.6807201268858066e-2],
    [-1, 1.5865525393145705e-1],
    [-0.7, 2.4196365222307303e-1],
    [-0.6745, 2.4999674286369917e-1],
    [-0.674, 2.5015565684032258e-1],
    [-0.5, 3.085375387259869e-1],
    [-0.25, 4.0129367431707628e-1],
    [-1e-8, 4.999999960105772e-1],
    [0, 5.0e-1],
    [1e-8, 5.000000039894228e-1],
    [0.25, 5.9870632568292372e-1],
    [0.5, 6.914624612740131e-1],
    [0.674, 7.4984434315967742e-1],
    [0.6745, 7.5000325713630083e-1],
    [0.7, 7.5803634777692697e-1],
    [1, 8.4134474606854295e-1],
    [1.5, 9.3319279873114193e-1],
    [2, 9.7724986805182079e-1],
    [2.5, 9.9379033467422386e-1],
    [3, 9.9865010196836991e-1],
    [4, 9.9996832875816688e-1],
    [5, 9.9999971334842812e-1],
    [5.656, 9.9999999225292668e-1],
    [5.657, 9.9999999229791183e-1],
    [6, 9.9999999901341235e-1],
    [7, 9.9999999999872019e-1],
    [8, 9.9999999999999938e-1],
    [8.3, 9.9999999999999995e-1],
  ];
  it('matches mpmath to 1e-15 relative over the whole line (1 subnormal ulp below 2.2e-308)', () => {
    for (const [x, ref] of mpmath) {
      const got = normCdf(x);
      if (ref < 2.2250738585072014e-308) expect(Math.abs(got - ref)).toBeLessThanOrEqual(5e-324);
      else expect(Math.abs(got - ref) / ref, `x = ${x}`).toBeLessThanOrEqual(1e-15);
    }
  });
});

describe('normCdf against @stdlib/stats-base-dists-normal-cdf', () => {
  // stdlib computes 0.5 erfc(-x / sqrt 2): the rounding of x / sqrt 2 is magnified by the tail's
  // slope, a relative error of about x^2 eps (we measured 1.2e-13 at x = -30, where mpmath sides
  // with us). The bound allows exactly that and nothing more.
  it('agrees on x = -38 .. 8.3 step 0.001 within (2 + 0.5 x^2) e-15 relative', () => {
    let worst = 0;
    for (let i = 0; i <= 46_300; i++) {
      const x = -38 + i * 0.001;
      const ref = stdlibCdf(x, 0, 1);
      const got = normCdf(x);
      if (ref < 2.2250738585072014e-308) {
        // Subnormal: the same relative bound, plus 20 ulps because fewer bits are left (at
        // x = -37.611 mpmath gives 7.1048493589122384e-310: ours ...225, stdlib ...35).
        expect(Math.abs(got - ref), `x = ${x}`).toBeLessThanOrEqual((2 + 0.5 * x * x) * 1e-15 * ref + 1e-322);
        continue;
      }
      const rel = Math.abs(got - ref) / ref;
      worst = Math.max(worst, rel / (2 + 0.5 * x * x));
      expect(rel, `x = ${x}`).toBeLessThanOrEqual((2 + 0.5 * x * x) * 1e-15);
    }
    expect(worst).toBeGreaterThan(0); // the loop really compared something
  });
});

describe('normCdf shape', () => {
  it('is 0 and 1 in the far tails, NaN for NaN', () => {
    expect(normCdf(-39)).toBe(0);
    expect(normCdf(-1e300)).toBe(0);
    expect(normCdf(-Infinity)).toBe(0);
    expect(normCdf(9)).toBe(1);
    expect(normCdf(Infinity)).toBe(1);
    expect(normCdf(NaN)).toBeNaN();
  });
  it('is symmetric: N(x) + N(-x) = 1', () => {
    for (let x = 0; x < 8; x += 0.01) expect(normCdf(x) + normCdf(-x)).toBeCloseTo(1, 15);
  });
  it('is monotone across the region boundaries', () => {
    let prev = 0;
    for (let x = -38; x <= 8.3; x += 1 / 1024) {
      const v = normCdf(x);
      expect(v).toBeGreaterThanOrEqual(prev);
      prev = v;
    }
  });
});

describe('normPdf', () => {
  it('matches exp(-x^2/2)/sqrt(2 pi) where that is exact enough, and mpmath in the tail', () => {
    expect(normPdf(0)).toBe(0.3989422804014327); // 1/sqrt(2 pi), common knowledge
    expect(Math.abs(normPdf(1) / 0.24197072451914335 - 1)).toBeLessThan(1e-15); // mpmath.npdf(1)
    // mpmath.npdf(30) = 1.4736461348785475e-196
    expect(Math.abs(normPdf(30) / 1.4736461348785475e-196 - 1)).toBeLessThan(1e-15);
    expect(normPdf(-30)).toBe(normPdf(30));
    expect(normPdf(41)).toBe(0);
  });
  it('gaussian() compensates the rounding of x^2', () => {
    // mpmath.exp(-mpf(37.1)**2/2) at the double 37.1: 1.3072723687206495e-299. Math.exp(-x*x/2)
    // carries the rounding of x*x, about 37.1^2 eps / 2 ~ 1.5e-13 relative here.
    expect(Math.abs(gaussian(37.1) / 1.3072723687206495e-299 - 1)).toBeLessThan(1e-15);
  });
});
