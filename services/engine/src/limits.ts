// The limit book and its alert state machine, independent of how exposures are computed: the engine
// feeds it per-partition nodes, the aggregation stage feeds it summed nodes, and both get the same
// alerts for the same values.
import { formatTs, nodeKey, parseTs } from '@keelson/shared-types';
import type { AlertLevel, AlertMsg, LimitMsg, Metric } from '@keelson/shared-types';
import { boundFor, nextLevel, transitionState, utilization } from './levels.ts';

/** What a check reads from a node: the metric values (delta and gamma may be null off-underlying). */
export type MetricValues = Readonly<Record<Metric, number | null>>;

/** One limit as the desk's screen shows it: bounds, current value and level. */
export interface LimitView {
  limitId: string;
  nodeKey: string;
  metric: Metric;
  max?: number;
  min?: number;
  warnAt: number;
  hysteresis: number;
  value: number;
  utilization: number;
  level: AlertLevel;
}

interface LimitState {
  limit: LimitMsg;
  scopeKey: string;
  level: AlertLevel;
  /** Episodes started so far; the current alertId is `${limitId}#${episodes}`. */
  episodes: number;
  value: number;
  utilization: number;
  checked: boolean;
  lastAlert: AlertMsg | undefined;
}

function byLimitId(a: { limitId: string }, b: { limitId: string }): number {
  return a.limitId < b.limitId ? -1 : a.limitId > b.limitId ? 1 : 0;
}

export class LimitMonitor {
  private readonly limits = new Map<string, LimitState>();
  /** scope nodeKey -> limitIds naming it, kept sorted so a node's alerts come out in limitId order. */
  private readonly byScope = new Map<string, string[]>();

  /**
   * Adds or replaces a limit. A replacement keeps the level and the episode (the contract: "its
   * level is kept and rechecked at once"); the caller rechecks with `checkLimit`.
   * Returns the scope key the limit named before, when a replacement moved it elsewhere.
   */
  set(limit: LimitMsg): { scopeKey: string; previousScopeKey?: string } {
    const scopeKey = nodeKey(limit.scope);
    const old = this.limits.get(limit.limitId);
    if (old) {
      old.limit = limit;
      if (old.scopeKey !== scopeKey) {
        const previousScopeKey = old.scopeKey;
        this.unindex(limit.limitId, previousScopeKey);
        old.scopeKey = scopeKey;
        this.index(limit.limitId, scopeKey);
        return { scopeKey, previousScopeKey };
      }
      return { scopeKey };
    }
    this.limits.set(limit.limitId, {
      limit,
      scopeKey,
      level: 'ok',
      episodes: 0,
      value: 0,
      utilization: 0,
      checked: false,
      lastAlert: undefined,
    });
    this.index(limit.limitId, scopeKey);
    return { scopeKey };
  }

  /** Removes a limit; an open episode ends with a `cleared` alert at the last checked value. */
  remove(limitId: string, tsMs: number): { alerts: AlertMsg[]; scopeKey?: string } {
    const st = this.limits.get(limitId);
    if (!st) return { alerts: [] };
    this.limits.delete(limitId);
    this.unindex(limitId, st.scopeKey);
    const alerts: AlertMsg[] = [];
    if (st.level !== 'ok') alerts.push(this.alert(st, 'ok', st.value, st.utilization, tsMs));
    return { alerts, scopeKey: st.scopeKey };
  }

  has(limitId: string): boolean {
    return this.limits.has(limitId);
  }

  get(limitId: string): LimitMsg | undefined {
    return this.limits.get(limitId)?.limit;
  }

  scopeOf(limitId: string): string | undefined {
    return this.limits.get(limitId)?.scopeKey;
  }

  /** Whether any limit watches this node. */
  watches(nodeKeyStr: string): boolean {
    return this.byScope.has(nodeKeyStr);
  }

  /** Node keys named by at least one limit, sorted. */
  scopes(): string[] {
    return [...this.byScope.keys()].sort();
  }

  /**
   * Checks every limit on a node; alerts in limitId order, stamped `tsMs`, or the exposure's own
   * `asOf` when no time is given (an aggregation stage checking summed exposures).
   */
  check(nodeKeyStr: string, values: MetricValues & { asOf?: string }, tsMs?: number): AlertMsg[] {
    const ids = this.byScope.get(nodeKeyStr);
    if (!ids) return [];
    const at = tsMs ?? (values.asOf !== undefined ? parseTs(values.asOf) : Number.NaN);
    if (!Number.isFinite(at))
      throw new RangeError(`LimitMonitor.check(${nodeKeyStr}): no time given and no asOf on the values`);
    const out: AlertMsg[] = [];
    for (const id of ids) {
      const a = this.checkLimit(id, values, at);
      if (a) out.push(a);
    }
    return out;
  }

  /** Checks one limit against its node's values; the alert when its level changed. */
  checkLimit(limitId: string, values: MetricValues, tsMs: number): AlertMsg | undefined {
    const st = this.limits.get(limitId);
    if (!st) return undefined;
    const { limit } = st;
    // delta and gamma limits are only accepted on scopes with an underlying, where they are numbers.
    const value = values[limit.metric] ?? 0;
    const u = utilization(value, limit.max, limit.min);
    st.value = value;
    st.utilization = u;
    st.checked = true;
    const next = nextLevel(st.level, u, limit.warnAt, limit.hysteresis);
    if (next === st.level) return undefined;
    return this.alert(st, next, value, u, tsMs);
  }

  /** The latest alert of each limit not at ok, in limitId order. */
  openAlerts(): AlertMsg[] {
    const out: AlertMsg[] = [];
    for (const st of this.limits.values()) if (st.level !== 'ok' && st.lastAlert) out.push(st.lastAlert);
    return out.sort(byLimitId);
  }

  utilizations(): { limitId: string; utilization: number }[] {
    return [...this.limits.values()]
      .map((st) => ({ limitId: st.limit.limitId, utilization: st.utilization }))
      .sort(byLimitId);
  }

  views(): LimitView[] {
    const out: LimitView[] = [];
    for (const st of this.limits.values()) {
      const { limit } = st;
      const v: LimitView = {
        limitId: limit.limitId,
        nodeKey: st.scopeKey,
        metric: limit.metric,
        warnAt: limit.warnAt,
        hysteresis: limit.hysteresis,
        value: st.value,
        utilization: st.utilization,
        level: st.level,
      };
      if (limit.max !== undefined) v.max = limit.max;
      if (limit.min !== undefined) v.min = limit.min;
      out.push(v);
    }
    return out.sort(byLimitId);
  }

  get size(): number {
    return this.limits.size;
  }

  private alert(st: LimitState, next: AlertLevel, value: number, u: number, tsMs: number): AlertMsg {
    const previous = st.level;
    if (previous === 'ok') st.episodes += 1;
    const { limit } = st;
    const a: AlertMsg = {
      type: 'alert',
      alertId: `${limit.limitId}#${st.episodes}`,
      limitId: limit.limitId,
      nodeKey: st.scopeKey,
      metric: limit.metric,
      value,
      bound: boundFor(value, limit.max, limit.min),
      utilization: u,
      severity: next,
      previous,
      state: transitionState(previous, next),
      ts: formatTs(tsMs),
    };
    st.level = next;
    st.lastAlert = a;
    return a;
  }

  private index(limitId: string, scopeKey: string): void {
    const ids = this.byScope.get(scopeKey);
    if (!ids) {
      this.byScope.set(scopeKey, [limitId]);
      return;
    }
    let i = ids.length;
    while (i > 0 && (ids[i - 1] as string) > limitId) i--;
    ids.splice(i, 0, limitId);
  }

  private unindex(limitId: string, scopeKey: string): void {
    const ids = this.byScope.get(scopeKey);
    if (!ids) return;
    const i = ids.indexOf(limitId);
    if (i >= 0) ids.splice(i, 1);
    if (ids.length === 0) this.byScope.delete(scopeKey);
  }
}
