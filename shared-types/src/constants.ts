/** Exposure metrics in the contract's table order. */
export const METRICS = [
  'pv',
  'pnl',
  'delta',
  'cashDelta',
  'gamma',
  'cashGamma',
  'vega',
  'theta',
  'rho',
] as const;
export type Metric = (typeof METRICS)[number];

/** Metrics defined only on nodes that fix one underlying (null elsewhere). */
export const UNDERLYING_ONLY_METRICS: readonly Metric[] = ['delta', 'gamma'];

/** Tenor buckets by whole days to expiry, shortest first. */
export const TENORS = ['0-30d', '31-90d', '91-180d', '181-365d', '366d+'] as const;
export type Tenor = (typeof TENORS)[number];

/** Unpriced reasons in the contract's precedence order: the first missing input names the reason. */
export const UNPRICED_REASONS = ['no-reference', 'no-spot', 'no-curve', 'no-vol', 'no-fx'] as const;
export type UnpricedReason = (typeof UNPRICED_REASONS)[number];

export const ALERT_LEVELS = ['ok', 'warning', 'breach'] as const;
export type AlertLevel = (typeof ALERT_LEVELS)[number];

export const ALERT_STATES = ['raised', 'escalated', 'eased', 'cleared'] as const;
export type AlertState = (typeof ALERT_STATES)[number];

export const UNDERLYING_KINDS = ['equity', 'future', 'fx'] as const;
export type UnderlyingKind = (typeof UNDERLYING_KINDS)[number];

export const OPTION_RIGHTS = ['call', 'put'] as const;
export type OptionRight = (typeof OPTION_RIGHTS)[number];

export const OPTION_PAYOFFS = ['vanilla', 'cash-digital', 'asset-digital'] as const;
export type OptionPayoff = (typeof OPTION_PAYOFFS)[number];

export const INPUT_TYPES = [
  'underlying',
  'spot',
  'vol-surface',
  'curve',
  'trade',
  'limit',
  'limit-remove',
] as const;
export type InputType = (typeof INPUT_TYPES)[number];

export const MS_PER_DAY = 86_400_000;

/**
 * The tenor bucket of an option: floor((expiry - valuation) / 1 day) whole days; an option already
 * expired (negative days) falls in the first bucket, as the contract says.
 */
export function tenorBucket(expiryMs: number, valuationMs: number): Tenor {
  const days = Math.floor((expiryMs - valuationMs) / MS_PER_DAY);
  if (days <= 30) return '0-30d';
  if (days <= 90) return '31-90d';
  if (days <= 180) return '91-180d';
  if (days <= 365) return '181-365d';
  return '366d+';
}
