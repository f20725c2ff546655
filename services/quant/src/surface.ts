// Implied-vol surface lookup per the contract's interpolation rule:
// 1. on each pillar expiry, linear in vol between neighbouring strikes, flat beyond the wings;
// 2. in time, total variance w = sigma^2 tau linear in tau between the pillars around the option,
//    flat vol before the first pillar still in the future and after the last one; pillars already
//    in the past (tau <= 0) are ignored.

/** A surface as seen at one valuation time: pillarTaus are year fractions from that time. */
export interface VolGrid {
  pillarTaus: number[];
  strikes: number[];
  /** vols[i][j]: pillar i, strike j. */
  vols: number[][];
}

function smileAt(strikes: number[], row: number[], k: number): number {
  const n = strikes.length;
  if (k <= strikes[0]!) return row[0]!;
  if (k >= strikes[n - 1]!) return row[n - 1]!;
  let lo = 0;
  let hi = n - 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >>> 1;
    if (strikes[mid]! <= k) lo = mid;
    else hi = mid;
  }
  const k0 = strikes[lo]!;
  const v0 = row[lo]!;
  return v0 + ((row[hi]! - v0) * (k - k0)) / (strikes[hi]! - k0);
}

function rowOf(g: VolGrid, i: number): number[] {
  const row = g.vols[i];
  if (!row || row.length !== g.strikes.length) {
    throw new RangeError(
      `vol grid row ${i} needs ${g.strikes.length} vols (got ${row ? row.length : 'none'})`,
    );
  }
  return row;
}

/**
 * The vol for strike `strike` and year fraction `tau`. When every pillar is already in the past,
 * the option is after the last pillar and gets that pillar's smile flat, the same rule as any
 * expiry beyond the last pillar.
 */
export function surfaceVol(g: VolGrid, strike: number, tau: number): number {
  const taus = g.pillarTaus;
  const n = taus.length;
  if (n === 0 || g.strikes.length === 0) {
    throw new RangeError(
      `vol grid needs at least one pillar and one strike (got ${n} pillars, ${g.strikes.length} strikes)`,
    );
  }
  if (g.vols.length !== n)
    throw new RangeError(`vol grid needs one row per pillar (got ${g.vols.length} rows, ${n} pillars)`);
  let first = 0; // first pillar still in the future
  while (first < n && !(taus[first]! > 0)) first++;
  if (first === n) return smileAt(g.strikes, rowOf(g, n - 1), strike);
  if (tau <= taus[first]!) return smileAt(g.strikes, rowOf(g, first), strike);
  if (tau >= taus[n - 1]!) return smileAt(g.strikes, rowOf(g, n - 1), strike);
  let i = first;
  while (taus[i + 1]! < tau) i++;
  const t1 = taus[i]!;
  const t2 = taus[i + 1]!;
  const s1 = smileAt(g.strikes, rowOf(g, i), strike);
  const s2 = smileAt(g.strikes, rowOf(g, i + 1), strike);
  const w1 = s1 * s1 * t1;
  const w2 = s2 * s2 * t2;
  const w = w1 + ((w2 - w1) * (tau - t1)) / (t2 - t1);
  return Math.sqrt(w / tau);
}
