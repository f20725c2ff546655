// Zero curve per the contract: continuously compounded zero rates at increasing tenors (years),
// linear in rate between tenors, flat before the first and after the last.

export interface ZeroCurve {
  tenors: Float64Array | number[];
  zeroRates: Float64Array | number[];
}

/** The zero rate r(tau). Throws on an empty curve, which has no rate to give. */
export function zeroRate(c: ZeroCurve, tau: number): number {
  const t = c.tenors;
  const z = c.zeroRates;
  const n = t.length;
  if (n === 0 || z.length !== n) {
    throw new RangeError(
      `zero curve needs as many zeroRates as tenors, at least one (got ${n} tenors, ${z.length} rates)`,
    );
  }
  if (tau <= t[0]!) return z[0]!;
  if (tau >= t[n - 1]!) return z[n - 1]!;
  // Largest i with t[i] <= tau; the guards above keep 0 <= i < n - 1.
  let lo = 0;
  let hi = n - 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >>> 1;
    if (t[mid]! <= tau) lo = mid;
    else hi = mid;
  }
  const t0 = t[lo]!;
  const t1 = t[hi]!;
  const z0 = z[lo]!;
  return z0 + ((z[hi]! - z0) * (tau - t0)) / (t1 - t0);
}

/** exp(-r(tau) tau): 1 at tau = 0. */
export function discountFactor(c: ZeroCurve, tau: number): number {
  return Math.exp(-zeroRate(c, tau) * tau);
}
