// The contract's level rules for one limit, as pure functions over numbers, so that the engine and
// the cross-partition aggregation stage move through exactly the same states.
import type { AlertLevel, AlertState } from '@keelson/shared-types';

const RANK: Record<AlertLevel, number> = { ok: 0, warning: 1, breach: 2 };
const BY_RANK: readonly AlertLevel[] = ['ok', 'warning', 'breach'];

/**
 * u = value / max when value >= 0 and max is set; value / min when value < 0 and min is set;
 * otherwise 0 (contract, "alert"). Always >= 0.
 */
export function utilization(value: number, max: number | undefined, min: number | undefined): number {
  if (value >= 0) return max !== undefined ? value / max : 0;
  return min !== undefined ? value / min : 0;
}

/** The bound that utilization was measured against (the other one when that side is unset). */
export function boundFor(value: number, max: number | undefined, min: number | undefined): number {
  if (value >= 0) return max ?? min ?? 0;
  return min ?? max ?? 0;
}

/**
 * Going up: the highest level whose threshold u reaches. Going down: the held level is kept while
 * u >= its threshold - hysteresis; otherwise the highest lower level whose threshold - hysteresis u
 * still reaches (ok always). Thresholds: warning = warnAt, breach = 1.
 */
export function nextLevel(current: AlertLevel, u: number, warnAt: number, hysteresis: number): AlertLevel {
  const thresholds = [Number.NEGATIVE_INFINITY, warnAt, 1];
  const cur = RANK[current];
  const reached = u >= 1 ? 2 : u >= warnAt ? 1 : 0;
  if (reached >= cur) return BY_RANK[reached] as AlertLevel;
  for (let l = cur; l >= 1; l--) {
    if (u >= (thresholds[l] as number) - hysteresis) return BY_RANK[l] as AlertLevel;
  }
  return 'ok';
}

/** The alert state of a level change (never called without a change). */
export function transitionState(previous: AlertLevel, next: AlertLevel): AlertState {
  if (next === 'ok') return 'cleared';
  if (previous === 'ok') return 'raised';
  return RANK[next] > RANK[previous] ? 'escalated' : 'eased';
}
