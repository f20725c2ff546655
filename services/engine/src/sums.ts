// Node sums move by differences for ever; Neumaier's compensated summation (an improved Kahan sum,
// A. Neumaier, "Rundungsfehleranalyse einiger Verfahren zur Summation endlicher Summen", ZAMM 1974)
// keeps the running error at the order of one rounding instead of growing with the number of updates.

/** The exposure metrics in contract order, as slots of a Float64Array. */
export const METRIC_COUNT = 9;
export const M_PV = 0;
export const M_PNL = 1;
export const M_DELTA = 2;
export const M_CASH_DELTA = 3;
export const M_GAMMA = 4;
export const M_CASH_GAMMA = 5;
export const M_VEGA = 6;
export const M_THETA = 7;
export const M_RHO = 8;

export function compensatedAdd(sum: Float64Array, comp: Float64Array, k: number, x: number): void {
  const s = sum[k] as number;
  const t = s + x;
  if (Math.abs(s) >= Math.abs(x)) comp[k] = (comp[k] as number) + (s - t + x);
  else comp[k] = (comp[k] as number) + (x - t + s);
  sum[k] = t;
}
