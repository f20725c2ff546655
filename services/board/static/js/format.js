// Number and time formatting for the desk view. Pure functions: also loaded by the unit tests.

export const MINUS = '\u2212';
export const NONE = '\u2013';

/** Short, fixed-width-friendly figure: 1.23M, 45.6k, 812, 3.14, 0.0123. */
export function compact(v) {
  if (v === null || v === undefined || !Number.isFinite(v)) return NONE;
  if (v === 0) return '0';
  const a = Math.abs(v);
  let s;
  if (a >= 1e9) s = `${(a / 1e9).toFixed(2)}B`;
  else if (a >= 1e6) s = `${(a / 1e6).toFixed(2)}M`;
  else if (a >= 1e4) s = `${(a / 1e3).toFixed(1)}k`;
  else if (a >= 100) s = a.toFixed(0);
  else if (a >= 1) s = a.toFixed(2);
  else s = a.toPrecision(3);
  // A value that rounds to zero at this precision still shows its sign: -0.000 would read as flat.
  return v < 0 ? MINUS + s : s;
}

/** Full-precision figure with grouping, for titles and the chart's readout. */
export function precise(v) {
  if (v === null || v === undefined || !Number.isFinite(v)) return NONE;
  const s = Math.abs(v).toLocaleString('en-US', { maximumFractionDigits: Math.abs(v) >= 100 ? 0 : 4 });
  return v < 0 ? MINUS + s : s;
}

export function percent(u) {
  if (!Number.isFinite(u)) return NONE;
  return `${(u * 100).toFixed(1)}%`;
}

/** `14:30:01.125Z`: the feed's own UTC clock, so the desk and the logs read the same time. */
export function clockTime(iso) {
  if (typeof iso !== 'string') return NONE;
  const m = /T(\d\d:\d\d:\d\d(?:\.\d{1,3})?)/.exec(iso);
  return m ? `${m[1]}Z` : iso;
}
